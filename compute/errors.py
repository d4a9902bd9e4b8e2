"""The one error a setup can raise once its snapshot has been read."""

from __future__ import annotations

__all__ = ["SetupError"]


class SetupError(ValueError):
    """A setup that cannot be computed as it stands; the message says what to change.

    Parameters
    ----------
    path
        The snapshot path of the setting at fault, e.g. ``numerics.grid``.
    message
        One plain sentence: what is wrong and what to change.
    """

    def __init__(self, path: str, message: str):
        self.path = path
        self.message = message
        super().__init__(f"{path}: {message}")
