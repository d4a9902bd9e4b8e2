"""fringebench's numerical core: scalar diffraction from aperture to screen.

This package imports numpy, scipy and param only; the user interface lives in
``server`` and depends on this package, never the reverse.
"""

__version__ = "0.1.0"
