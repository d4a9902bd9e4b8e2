"""How much work a computation is before it runs, and stopping one part-way.

A shared server has to decide before it starts a job whether the job is cheap
(an ordinary edit: a fraction of a second) or heavy (a broad-band source of
finite size: many monochromatic screens), and whether it is too heavy to start
at all. :func:`estimate` answers from the plan alone, without propagating:

* the working memory of one propagation (the planner's estimate);
* the number of monochromatic screens the sum needs (wavelengths × source
  directions, × camera tiles);
* the floating-point operations: per screen, a forward and an inverse transform
  and the kernel of the padded grid for a convolution method (``5 N log₂ N``
  each, the usual count of a radix-2 complex FFT [1]_), or the two matrix
  products of a transform straight onto the screen pixels; plus the aperture's
  quadrature weights.

The count is a measure of size, not a prediction to the second: it is
proportional to the run time of one method on one machine, which is what a
limit needs.

Stopping a long sum between its screens lives in :mod:`compute.cancel`.

References
----------
.. [1] J. W. Cooley and J. W. Tukey, "An algorithm for the machine calculation
   of complex Fourier series", Math. Comp. 19, 297–301 (1965); the 5 N log₂ N
   flop count of a complex radix-2 FFT is the common benchmark convention
   (common practice, no source for the constant).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from compute import incoherent, planning
from compute.model import Setup
from compute.planning import DEFAULT_MEMORY_LIMIT

__all__ = ["Work", "estimate"]

#: Transforms of the padded grid per monochromatic screen (forward, kernel, inverse).
_TRANSFORMS = 3
#: Floating-point operations per sample for the aperture's quadrature weights (rough).
_RASTER_FLOPS = 100.0


@dataclass(frozen=True)
class Work:
    """The size of a computation, before it runs.

    Attributes
    ----------
    flops
        Floating-point operations, all screens together.
    components
        Monochromatic screens summed (1 for a coherent setup).
    memory_bytes
        Working memory of one propagation (the planner's estimate).
    method
        The propagation method of the plan.
    padded
        Transform size (ny, nx) of one screen.
    """

    flops: float
    components: int
    memory_bytes: int
    method: str
    padded: tuple[int, int]

    @property
    def gflop(self) -> float:
        return self.flops / 1e9

    def describe(self) -> str:
        """``'about 12 GFLOP (8 screens of a 2048 × 2048 transform)'``."""
        ny, nx = self.padded
        screens = f"{self.components} screen{'s' if self.components != 1 else ''}"
        return f"about {self.gflop:.3g} GFLOP ({screens} of a {nx} × {ny} transform)"


def _per_screen(plan: planning.Plan, screen_shape: tuple[int, int]) -> float:
    sy, sx = screen_shape
    if tuple(plan.padded) != (plan.ny, plan.nx):  # a convolution: transforms of the padded grid
        n = max(2, plan.padded[0] * plan.padded[1])
        return _TRANSFORMS * 5.0 * n * math.log2(n)
    # A transform straight onto the screen pixels: two matrix products (8 flops per
    # complex multiply-add), or one FFT of the grid, whichever is larger.
    n = max(2, plan.ny * plan.nx)
    direct = 8.0 * (plan.ny * plan.nx * sx + plan.ny * sx * sy)
    return max(direct, 5.0 * n * math.log2(n))


def estimate(setup: Setup, *, memory_limit: int = DEFAULT_MEMORY_LIMIT) -> Work:
    """The :class:`Work` of computing ``setup``, from its plan (nothing is propagated).

    Raises
    ------
    SetupError
        When the planner refuses the setup (the same message a computation gives).
    """
    if incoherent.needed(setup):
        r = incoherent.route(setup, memory_limit=memory_limit)
        plan = r.plan
        components = r.components * max(1, len(r.tiles))
    else:
        r = None
        plan = planning.plan(setup, memory_limit=memory_limit)
        components = 1
    shape = setup.screen.shape_px()
    if r is not None and r.tiles:
        shape = max((t.screen.shape_px() for t in r.tiles), key=lambda s: s[0] * s[1])
    flops = components * _per_screen(plan, shape) + _RASTER_FLOPS * plan.nx * plan.ny
    return Work(
        flops=float(flops),
        components=int(components),
        memory_bytes=int(plan.memory_bytes),
        method=str(plan.method),
        padded=(int(plan.padded[0]), int(plan.padded[1])),
    )
