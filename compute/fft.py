"""The FFT backend: one place that decides how 2-D transforms run on this machine."""

from __future__ import annotations

import os

import numpy as np
import scipy.fft

__all__ = ["WORKERS", "fft2", "ifft2", "next_fast_len"]

WORKERS = max(1, os.cpu_count() or 1)


def next_fast_len(n: int) -> int:
    """Smallest length ≥ n that the FFT handles fast (a product of small primes)."""
    return int(scipy.fft.next_fast_len(int(n), real=False))


def fft2(a: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """Forward 2-D FFT over the last two axes, in the precision of ``a``."""
    return scipy.fft.fft2(a, workers=WORKERS, overwrite_x=overwrite)


def ifft2(a: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """Inverse 2-D FFT over the last two axes, in the precision of ``a``."""
    return scipy.fft.ifft2(a, workers=WORKERS, overwrite_x=overwrite)
