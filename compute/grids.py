"""Uniform sample grids: pixel-centred coordinates shared by every layer."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Grid", "centred_axis"]


def centred_axis(n: int, pitch: float, centre: float = 0.0) -> np.ndarray:
    """Pixel centres of ``n`` samples at ``pitch`` with sample ``n // 2`` on ``centre``.

    This is the FFT convention: with ``centre = 0`` the zero sample sits at index
    ``n // 2``, as after ``numpy.fft.fftshift``.
    """
    return centre + (np.arange(n) - n // 2) * pitch


@dataclass(frozen=True)
class Grid:
    """A rectangular grid of ``ny`` rows by ``nx`` columns, pitch ``dx`` by ``dy``.

    Sample ``(j, i)`` sits at ``(x[i], y[j])``; arrays on the grid have shape
    ``(ny, nx)``.
    """

    nx: int
    ny: int
    dx: float
    dy: float
    cx: float = 0.0
    cy: float = 0.0

    @property
    def x(self) -> np.ndarray:
        return centred_axis(self.nx, self.dx, self.cx)

    @property
    def y(self) -> np.ndarray:
        return centred_axis(self.ny, self.dy, self.cy)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.ny, self.nx)

    @property
    def cell_area(self) -> float:
        return self.dx * self.dy

    @property
    def extent(self) -> tuple[float, float]:
        """Full width and height covered by the pixels, m."""
        return (self.nx * self.dx, self.ny * self.dy)
