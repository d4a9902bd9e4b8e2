"""The setup of one bench: source, aperture, screen and numerics as typed parameters.

Every quantity is SI (metres, watts, W/m², radians). Each parameter carries its
unit in ``metadata["unit"]`` so that the user interface can convert at the edge
and show it; bounds and docs live here and nowhere else.

The classes mirror the snapshot format (see ``compute.snapshot``): one class per
section, one subclass of :class:`Element` per aperture shape.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import param

__all__ = [
    "ELEMENT_TYPES",
    "Annulus",
    "Aperture",
    "Camera",
    "Circle",
    "Edge",
    "Element",
    "Grating",
    "Image",
    "Numerics",
    "Polygon",
    "Rect",
    "Screen",
    "Setup",
    "Source",
    "unit_of",
]

# Hard limits shared by the model and the snapshot reader.
MAX_LENGTH = 10.0  # m; no aperture element on a bench is larger
MAX_OFFSET = 10.0  # m
MAX_IMAGE_PIXELS = 2048 * 2048
MAX_POLYGON_VERTICES = 1000
MAX_GRATING_COUNT = 100_000
MAX_SPECTRAL_SAMPLES = 256
MAX_SOURCE_DIAMETER = 0.1  # rad; the sun is 0.0093 rad, a frosted LED at a few cm ~0.05
MAX_CAMERA_PIXELS_PER_SIDE = 4096
# Relative widths of a spectrum about its centre that keep every sampled wavelength
# positive: a Gaussian is sampled over ±3.5 standard deviations, a flat band over its width.
MAX_GAUSSIAN_FWHM = 0.6  # × wavelength
MAX_FLAT_WIDTH = 1.5  # × wavelength
GAUSSIAN_SPAN = 3.5  # sampled half-span of a Gaussian spectrum, in standard deviations
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


MIN_LENGTH = 1e-10  # m; below an atom's size no scalar diffraction applies


def _length(default, doc, *, lower=MIN_LENGTH, upper=MAX_LENGTH, open_lower=False, **kw):
    return param.Number(
        default,
        bounds=(lower, upper),
        inclusive_bounds=(not open_lower, True),
        doc=doc,
        metadata={"unit": "m"},
        **kw,
    )


def _offset(default, doc, **kw):
    return param.Number(
        default, bounds=(-MAX_OFFSET, MAX_OFFSET), doc=doc, metadata={"unit": "m"}, **kw
    )


def _angle(default, doc, limit=2 * math.pi):
    return param.Number(default, bounds=(-limit, limit), doc=doc, metadata={"unit": "rad"})


def unit_of(obj: param.Parameterized, name: str) -> str:
    """Return the SI unit of parameter ``name`` of ``obj`` ('' when dimensionless)."""
    meta = obj.param[name].metadata or {}
    return meta.get("unit", "")


class Source(param.Parameterized):
    """The illumination incident on the aperture plane."""

    kind = param.Selector(
        default="plane",
        objects=["plane", "gaussian", "point"],
        doc="Kind of source: a plane wave, a Gaussian beam, or a point source.",
    )
    wavelength = param.Number(
        6.328e-7,
        bounds=(1e-10, 1e-3),
        doc="Vacuum wavelength, m.",
        metadata={"unit": "m"},
    )
    irradiance = param.Number(
        100.0,
        bounds=(0.0, 1e15),
        doc="Incident irradiance of the plane wave, W/m², on a plane normal to it (|U|²).",
        metadata={"unit": "W/m²"},
    )
    power = param.Number(
        1e-3,
        bounds=(0.0, 1e9),
        doc="Total power of the Gaussian beam, or of the point source, which radiates it "
        "isotropically: P/(4πρ²) at distance ρ, W.",
        metadata={"unit": "W"},
    )
    waist = _length(1e-3, "1/e² intensity radius of the Gaussian beam at its waist, m.", upper=1.0)
    waist_offset = param.Number(
        0.0,
        bounds=(-1e4, 1e4),
        doc="Distance from the waist to the aperture plane, m; positive when the waist "
        "lies before the aperture.",
        metadata={"unit": "m"},
    )
    distance = _length(0.1, "Distance of the point source before the aperture plane, m.", upper=1e4)
    tilt_x = _angle(
        0.0,
        "Angle of incidence in the x–z plane (about the y axis), rad: the wave's direction "
        "cosine along x is sin(tilt_x); a positive tilt sends the light, and the pattern, "
        "towards +x. For a point source, the angle of its ray to the aperture's origin.",
        limit=1.0,
    )
    tilt_y = _angle(
        0.0,
        "Angle of incidence in the y–z plane (about the x axis), rad: the direction cosine "
        "along y is sin(tilt_y); a positive tilt moves the pattern towards +y.",
        limit=1.0,
    )
    spectrum = param.Selector(
        default="none",
        objects=["none", "gaussian", "flat"],
        doc="Spectrum of the source: 'none' for monochromatic light at the wavelength; "
        "'gaussian' (full width at half maximum = bandwidth) or 'flat' (full width = "
        "bandwidth), centred on the wavelength and shaped in wavelength.",
    )
    bandwidth = param.Number(
        1e-8,
        bounds=(0.0, 1e-3),
        doc="Width of the spectrum, m: the FWHM of a Gaussian spectrum, the full width of a "
        "flat one; 0 is monochromatic.",
        metadata={"unit": "m"},
    )
    spectral_samples = param.Integer(
        0,
        bounds=(0, MAX_SPECTRAL_SAMPLES),
        doc="Wavelengths sampled across the spectrum; 0 chooses the number from the path "
        "differences that the screen sees.",
        metadata={"unit": ""},
    )
    source_diameter = param.Number(
        0.0,
        bounds=(0.0, MAX_SOURCE_DIAMETER),
        doc="Angular diameter of the source seen from the aperture, rad: a uniform, "
        "incoherent disk of directions about the incidence; 0 for a point-like source.",
        metadata={"unit": "rad"},
    )

    def check(self) -> list[tuple[str, str]]:
        """Cross-parameter rules of the spectrum: every sampled wavelength stays in range."""
        if self.spectrum == "none" or self.bandwidth == 0.0:
            return []
        lam, width = self.wavelength, self.bandwidth
        if self.spectrum == "gaussian" and width > MAX_GAUSSIAN_FWHM * lam:
            return [
                (
                    "bandwidth",
                    f"a Gaussian spectrum of FWHM {width:g} m about {lam:g} m reaches zero "
                    f"wavelength; use a FWHM of at most {MAX_GAUSSIAN_FWHM:g} × the wavelength",
                )
            ]
        if self.spectrum == "flat" and width > MAX_FLAT_WIDTH * lam:
            return [
                (
                    "bandwidth",
                    f"a flat spectrum {width:g} m wide about {lam:g} m reaches too short "
                    f"wavelengths; use at most {MAX_FLAT_WIDTH:g} × the wavelength",
                )
            ]
        half = GAUSSIAN_SPAN * width / FWHM_PER_SIGMA if self.spectrum == "gaussian" else width / 2
        if lam + half > 1e-3:
            return [("bandwidth", f"the spectrum reaches beyond 1 mm ({lam + half:g} m)")]
        return []


class Element(param.Parameterized):
    """One painted element of the aperture; subclasses add the shape."""

    shape: str = ""

    x = _offset(0.0, "Centre of the element, x, m.")
    y = _offset(0.0, "Centre of the element, y, m.")
    angle = _angle(0.0, "Rotation about the centre, counter-clockwise from +x, rad.")
    transmission = param.Number(
        1.0,
        bounds=(0.0, 1.0),
        doc="Amplitude transmission inside the element, 0 to 1.",
        metadata={"unit": ""},
    )
    phase = param.Number(
        0.0,
        bounds=(-1e3, 1e3),
        doc="Phase added inside the element, rad.",
        metadata={"unit": "rad"},
    )

    def shape_keys(self) -> list[str]:
        """Names of the parameters that this shape adds to the common ones."""
        common = set(Element.param)
        return [n for n in self.param if n not in common]

    def check(self) -> list[tuple[str, str]]:
        """Cross-parameter rules that bounds cannot express: ``[(key, message), ...]``."""
        return []


class Rect(Element):
    """A rectangle, ``width`` along the element's x axis and ``height`` along its y axis."""

    shape = "rect"
    width = _length(5e-5, "Full width along the element's x axis, m.")
    height = _length(2e-3, "Full height along the element's y axis, m.")


class Circle(Element):
    """A disk."""

    shape = "circle"
    diameter = _length(1e-3, "Diameter, m.")


class Annulus(Element):
    """A ring between two concentric circles."""

    shape = "annulus"
    diameter = _length(2e-3, "Outer diameter, m.")
    inner_diameter = _length(1e-3, "Inner diameter, m.", lower=0.0)

    def check(self):
        if self.inner_diameter >= self.diameter:
            return [
                (
                    "inner_diameter",
                    f"inner_diameter {self.inner_diameter:g} m must be smaller than "
                    f"diameter {self.diameter:g} m",
                )
            ]
        return []


class Grating(Element):
    """``count`` rectangular openings side by side along the element's x axis."""

    shape = "grating"
    count = param.Integer(
        10,
        bounds=(1, MAX_GRATING_COUNT),
        doc="Number of openings.",
        metadata={"unit": ""},
    )
    period = _length(1e-4, "Centre-to-centre distance of the openings, m.")
    width = _length(5e-5, "Width of each opening, m.")
    height = _length(2e-3, "Height of the openings, m.")

    def check(self):
        if self.width > self.period:
            return [
                (
                    "width",
                    f"width {self.width:g} m must not exceed period {self.period:g} m",
                )
            ]
        return []


class Edge(Element):
    """A half-plane covering x′ ≥ 0 in the element's own frame, through (x, y)."""

    shape = "edge"


def _plain_pairs(v: list) -> bool:
    """Every item of ``v`` is a list or tuple of two ints or floats (no bools)."""
    if not all(type(p) in (list, tuple) and len(p) == 2 for p in v):
        return False
    kinds = set(map(type, itertools.chain.from_iterable(v)))
    return kinds <= {float, int}


class Polygon(Element):
    """A simple polygon; ``vertices`` are relative to the element's centre."""

    shape = "polygon"
    vertices = param.List(
        default=[[-5e-4, -5e-4], [5e-4, -5e-4], [0.0, 5e-4]],
        doc="Vertices [[x, y], ...] relative to the centre, m; at least three.",
        metadata={"unit": "m"},
    )

    def check(self):
        v = self.vertices
        if len(v) < 3:
            return [("vertices", f"a polygon needs at least 3 vertices, got {len(v)}")]
        if len(v) > MAX_POLYGON_VERTICES:
            return [("vertices", f"at most {MAX_POLYGON_VERTICES} vertices, got {len(v)}")]
        first_bad = 0
        if _plain_pairs(v):  # the usual case, checked at C speed; else vertex by vertex
            try:
                flat = np.asarray(v, dtype=np.float64)
            except OverflowError:  # an int beyond float range: the loop reports it
                flat = None
            if flat is not None:
                bad = ~(np.isfinite(flat) & (np.abs(flat) <= MAX_LENGTH)).all(axis=1)
                first_bad = int(np.argmax(bad)) if bad.any() else len(v)
        for i, p in enumerate(v[first_bad:], start=first_bad):
            ok = (
                isinstance(p, (list, tuple))
                and len(p) == 2
                and all(
                    isinstance(c, (int, float))
                    and not isinstance(c, bool)
                    and math.isfinite(c)
                    and abs(c) <= MAX_LENGTH
                    for c in p
                )
            )
            if not ok:
                return [(f"vertices[{i}]", f"expected [x, y] in metres, got {p!r}")]
        # The same products as term by term, summed in the same order.
        xy = np.asarray(v, dtype=np.float64)
        nxt = np.roll(xy, -1, axis=0)
        area = 0.5 * sum((xy[:, 0] * nxt[:, 1] - nxt[:, 0] * xy[:, 1]).tolist())
        if area == 0.0:
            return [("vertices", "the polygon has zero area")]
        return []


class Image(Element):
    """A grey-level mask: a PNG whose grey level is the amplitude transmission."""

    shape = "image"
    data = param.String(
        default="",
        doc="The mask as a PNG data URL (data:image/png;base64,...).",
        metadata={"unit": ""},
    )
    width = _length(1e-3, "Width of the image on the aperture plane, m.")
    height = _length(1e-3, "Height of the image on the aperture plane, m.")


ELEMENT_TYPES: dict[str, type[Element]] = {
    cls.shape: cls for cls in (Rect, Circle, Annulus, Grating, Edge, Polygon, Image)
}


class Aperture(param.Parameterized):
    """The aperture plane: a background and elements painted over it in list order."""

    background = param.Selector(
        default="opaque",
        objects=["opaque", "clear"],
        doc="'opaque': light passes only inside elements; 'clear': everywhere except "
        "where elements say otherwise.",
    )
    elements = param.List(
        default=[], item_type=Element, doc="Elements painted in order over the background."
    )


class Screen(param.Parameterized):
    """The observed window behind the aperture (or behind the lens, when one is set)."""

    distance = _length(1.0, "Distance from the aperture (or lens) to the screen, m.", upper=1e6)
    width = _length(0.02, "Width of the observed window, m.", upper=1e3)
    height = _length(0.01, "Height of the observed window, m.", upper=1e3)
    x = param.Number(0.0, bounds=(-1e3, 1e3), doc="Window centre, x, m.", metadata={"unit": "m"})
    y = param.Number(0.0, bounds=(-1e3, 1e3), doc="Window centre, y, m.", metadata={"unit": "m"})
    samples = param.Integer(
        400,
        bounds=(2, 4096),
        doc="Pixels across the width; the height follows the aspect ratio. Each pixel's "
        "value is the irradiance at its centre (a point sample), not a pixel average.",
        metadata={"unit": ""},
    )
    lens_focal_length = param.Number(
        None,
        allow_None=True,
        bounds=(-1e3, 1e3),
        doc="Focal length of a thin lens right behind the aperture, m; None for no lens.",
        metadata={"unit": "m"},
    )

    def shape_px(self) -> tuple[int, int]:
        """Screen pixels ``(ny, nx)``: ``samples`` across, the height by the aspect ratio."""
        nx = int(self.samples)
        ny = max(1, round(nx * self.height / self.width))
        return ny, nx

    def check(self):
        f = self.lens_focal_length
        if f is not None and abs(f) < 1e-6:
            return [("lens_focal_length", f"focal length {f:g} m is too short (|f| ≥ 1e-6 m)")]
        ny, _ = self.shape_px()
        if ny > 4096:
            return [("height", f"height/width ratio gives {ny} pixel rows; at most 4096")]
        return []


class Numerics(param.Parameterized):
    """How the field is computed."""

    method = param.Selector(
        default="auto",
        objects=["auto", "fraunhofer", "fresnel", "angular_spectrum", "rayleigh_sommerfeld"],
        doc="Propagation method; 'auto' chooses one for the setup and says why.",
    )
    grid = param.Integer(
        0,
        bounds=(0, 32768),
        doc="Samples per side in the aperture plane; 0 plans the grid automatically.",
        metadata={"unit": ""},
    )
    precision = param.Selector(
        default="single",
        objects=["single", "double"],
        doc="Floating-point precision of the propagation.",
    )

    def check(self):
        if 0 < self.grid < 16:
            return [("grid", f"grid {self.grid} is too coarse; use 0 (automatic) or ≥ 16")]
        return []


class Camera(param.Parameterized):
    """A camera sensor on the screen plane: its pixels, their response and their noise.

    The sensor is ``pixels_x`` × ``pixels_y`` square pixels of ``pixel_pitch``, centred
    on (``offset_x``, ``offset_y``) of the screen plane. Each pixel collects the light on
    its active area (a centred square holding ``fill_factor`` of the pixel), turns the
    photons into photoelectrons with ``quantum_efficiency``, holds at most ``full_well``
    of them, and is read out with ``read_noise`` into digital numbers of ``bit_depth``
    bits, full scale at the full well.
    """

    pixel_pitch = _length(
        5e-6, "Centre-to-centre distance of the pixels, m.", lower=1e-7, upper=1e-3
    )
    pixels_x = param.Integer(
        1280,
        bounds=(1, MAX_CAMERA_PIXELS_PER_SIDE),
        doc="Pixels across the sensor (along x).",
        metadata={"unit": ""},
    )
    pixels_y = param.Integer(
        1024,
        bounds=(1, MAX_CAMERA_PIXELS_PER_SIDE),
        doc="Pixels down the sensor (along y).",
        metadata={"unit": ""},
    )
    offset_x = param.Number(
        0.0,
        bounds=(-1e3, 1e3),
        doc="Centre of the sensor on the screen plane, x, m.",
        metadata={"unit": "m"},
    )
    offset_y = param.Number(
        0.0,
        bounds=(-1e3, 1e3),
        doc="Centre of the sensor on the screen plane, y, m.",
        metadata={"unit": "m"},
    )
    fill_factor = param.Number(
        1.0,
        bounds=(0.0, 1.0),
        inclusive_bounds=(False, True),
        doc="Fraction of each pixel's area that collects light (a centred square).",
        metadata={"unit": ""},
    )
    quantum_efficiency = param.Number(
        0.6,
        bounds=(0.0, 1.0),
        inclusive_bounds=(False, True),
        doc="Photoelectrons per incident photon on the active area.",
        metadata={"unit": ""},
    )
    exposure = param.Number(
        5e-5,
        bounds=(0.0, 1e4),
        inclusive_bounds=(False, True),
        doc="Exposure time, s.",
        metadata={"unit": "s"},
    )
    full_well = param.Number(
        2e4,
        bounds=(1.0, 1e9),
        doc="Photoelectrons a pixel holds before it saturates; the digital full scale.",
        metadata={"unit": "e⁻"},
    )
    bit_depth = param.Integer(
        12,
        bounds=(1, 32),
        doc="Bits of the digital numbers; full scale 2^bits − 1 at the full well.",
        metadata={"unit": ""},
    )
    read_noise = param.Number(
        2.0,
        bounds=(0.0, 1e6),
        doc="Read noise, photoelectrons rms.",
        metadata={"unit": "e⁻"},
    )
    shot_noise = param.Boolean(
        True, doc="Draw the photoelectrons from their Poisson distribution (photon shot noise)."
    )
    seed = param.Integer(
        0,
        bounds=(0, 2**32 - 1),
        doc="Seed of the noise: the same seed gives the same frame.",
        metadata={"unit": ""},
    )


class Setup(param.Parameterized):
    """A whole bench: what a snapshot holds."""

    source = param.ClassSelector(class_=Source, default=None, instantiate=True)
    aperture = param.ClassSelector(class_=Aperture, default=None, instantiate=True)
    screen = param.ClassSelector(class_=Screen, default=None, instantiate=True)
    numerics = param.ClassSelector(class_=Numerics, default=None, instantiate=True)
    camera = param.ClassSelector(
        class_=Camera,
        default=None,
        allow_None=True,
        doc="A camera sensor on the screen plane, or None for the screen alone.",
    )
    meta = param.Dict(default={}, doc="Title, note, creation time, app version.")
    view = param.Dict(default={}, doc="Display settings; they never change a computed number.")

    def __init__(self, **params):
        # Build a default section only when it is missing (setdefault would build all four).
        for name, cls in (
            ("source", Source),
            ("aperture", Aperture),
            ("screen", Screen),
            ("numerics", Numerics),
        ):
            if name not in params:
                params[name] = cls()
        super().__init__(**params)

    def check(self) -> list[tuple[str, str]]:
        """Cross-parameter rules of the whole setup, as ``[(path, message), ...]``."""
        problems = [(f"source.{k}", m) for k, m in self.source.check()]
        problems += [(f"screen.{k}", m) for k, m in self.screen.check()]
        problems += [(f"numerics.{k}", m) for k, m in self.numerics.check()]
        for i, el in enumerate(self.aperture.elements):
            problems += [(f"aperture.elements[{i}].{k}", m) for k, m in el.check()]
        return problems
