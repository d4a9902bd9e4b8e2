"""Heavy but valid setups for the fairness tests of a shared server (our own numbers).

``broadband_doc``: a flat spectrum from a source of finite size, a sum of many
monochromatic screens. ``many_polygons_doc``: a hundred wavy slits of a thousand
vertices each, a snapshot of about 2.8 MB.
"""

from __future__ import annotations

import math

__all__ = ["broadband_doc", "many_polygons_doc"]


def broadband_doc(samples: int = 64, wavelengths: int = 4, diameter: float = 2e-3) -> dict:
    """A flat spectrum and a source of finite size: a sum of many screens (our own numbers)."""
    return {
        "format": "fringebench-snapshot",
        "version": 1,
        "meta": {"title": "broad band, finite source"},
        "source": {
            "kind": "plane",
            "wavelength": 6e-7,
            "irradiance": 10.0,
            "spectrum": "flat",
            "bandwidth": 1e-7,
            "spectral_samples": wavelengths,
            "source_diameter": diameter,
        },
        "aperture": {
            "background": "opaque",
            "elements": [{"shape": "rect", "x": 0.0, "y": 0.0, "width": 5e-4, "height": 5e-4}],
        },
        "screen": {"distance": 0.005, "width": 0.002, "height": 0.002, "samples": samples},
        "numerics": {"method": "angular_spectrum", "grid": 256, "precision": "double"},
    }


def many_polygons_doc(polygons: int = 100, vertices: int = 1000) -> dict:
    """``polygons`` wavy slits of ``vertices`` vertices each, side by side (our own numbers)."""
    width, half = 0.01, vertices // 2
    period = width / polygons
    half_w = period / 4
    els = []
    for k in range(polygons):
        ys = [-width / 2 + width * i / (half - 1) for i in range(half)]

        def wig(y: float, k: int = k) -> float:
            return 0.2 * half_w * math.sin(6 * math.pi * y / width + k)

        ring = [[half_w + wig(y), y] for y in ys] + [[-half_w + wig(y), y] for y in ys[::-1]]
        verts = [[float(f"{a:.6g}"), float(f"{b:.6g}")] for a, b in ring]
        x = (k - (polygons - 1) / 2) * period
        els.append({"shape": "polygon", "x": x, "y": 0.0, "vertices": verts})
    return {
        "format": "fringebench-snapshot",
        "version": 1,
        "meta": {"title": f"{polygons} wavy slits"},
        "source": {"kind": "plane", "wavelength": 6.33e-7, "irradiance": 10.0},
        "aperture": {"background": "opaque", "elements": els},
        "screen": {"distance": 1.0, "width": 0.02, "height": 0.02, "samples": 200},
        "numerics": {"method": "auto", "grid": 0, "precision": "double"},
    }
