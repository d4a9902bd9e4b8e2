"""Small builders of setups for the tests: one line per bench."""

from __future__ import annotations

from compute import model


def bench(
    *elements: model.Element,
    wavelength: float = 6.328e-7,
    distance: float = 1.0,
    width: float = 0.02,
    height: float | None = None,
    samples: int = 201,
    x: float = 0.0,
    y: float = 0.0,
    method: str = "auto",
    precision: str = "double",
    grid: int = 0,
    background: str = "opaque",
    lens: float | None = None,
    **source,
) -> model.Setup:
    """A setup with the given elements; keyword arguments not named here go to the source."""
    src = model.Source(wavelength=wavelength, **source)
    return model.Setup(
        source=src,
        aperture=model.Aperture(background=background, elements=list(elements)),
        screen=model.Screen(
            distance=distance,
            width=width,
            height=width if height is None else height,
            samples=samples,
            x=x,
            y=y,
            lens_focal_length=lens,
        ),
        numerics=model.Numerics(method=method, precision=precision, grid=grid),
    )


def centre_row(result):
    """The horizontal cut through the row nearest y = 0: (x, irradiance)."""
    import numpy as np

    j = int(np.argmin(np.abs(result.y)))
    return result.x, result.intensity[j]


def centre_column(result):
    import numpy as np

    i = int(np.argmin(np.abs(result.x)))
    return result.y, result.intensity[:, i]
