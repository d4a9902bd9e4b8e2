"""The dashboard and the command line of fringebench; imports compute, never the reverse."""
