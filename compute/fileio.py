"""Small helpers for the files that fringebench writes.

A file written through a temporary neighbour (``tempfile.mkstemp``, then
``os.replace``) would keep mkstemp's private mode 0600; :func:`new_file_mode`
gives the mode an ordinary ``open(path, "w")`` would have given instead.
"""

from __future__ import annotations

import os
import threading

__all__ = ["new_file_mode", "umask"]

_LOCK = threading.Lock()


def umask() -> int:
    """The process's file-mode creation mask, read without changing it for long.

    Linux reports it in ``/proc/self/status``; elsewhere it is set and restored
    at once, under a lock.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    with _LOCK:
        mask = os.umask(0o022)
        os.umask(mask)
    return mask


def new_file_mode() -> int:
    """Permission bits of a new regular file under the current umask (0o666 & ~umask)."""
    return 0o666 & ~umask()
