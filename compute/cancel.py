"""Stopping a computation part-way, between the screens of a sum.

:func:`cancel_scope` binds a :class:`threading.Event` to the running thread;
:func:`checkpoint`, called by the sums before each monochromatic screen, raises
:class:`Cancelled` once the event is set. A server sets the event when the same
user asks for something newer, so an outdated heavy sum gives its lane back
within one screen.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Iterator

__all__ = ["Cancelled", "cancel_scope", "cancelled", "checkpoint"]


class Cancelled(Exception):
    """The computation was stopped by a newer request of the same user."""

    def __init__(self) -> None:
        super().__init__("stopped for a newer request")


_LOCAL = threading.local()


@contextlib.contextmanager
def cancel_scope(event: threading.Event | None) -> Iterator[None]:
    """Within the block, :func:`checkpoint` in this thread raises once ``event`` is set."""
    previous = getattr(_LOCAL, "event", None)
    _LOCAL.event = event
    try:
        yield
    finally:
        _LOCAL.event = previous


def cancelled() -> bool:
    """Whether this thread's computation has been asked to stop."""
    event = getattr(_LOCAL, "event", None)
    return event is not None and event.is_set()


def checkpoint() -> None:
    """Raise :class:`Cancelled` when this thread's computation has been asked to stop."""
    if cancelled():
        raise Cancelled()
