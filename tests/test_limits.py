"""The size limits fit inside one another, and the snapshot reference states the
ranges that the error messages give.

An image's PNG must fit in a snapshot (as base64), a snapshot in an upload
(a websocket message, base64 again), and every range in docs/snapshot.md must
be the one a refused value is told about.
"""

from __future__ import annotations

import base64
import io
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from compute import model, snapshot
from compute.pngdata import MAX_IMAGE_BYTES, MAX_IMAGE_PIXELS
from server import serving
from server.app import load_preset

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "snapshot.md"
PREFIX = "data:image/png;base64,"


def _base64_size(n: int) -> int:
    return 4 * math.ceil(n / 3)


def _noise_png(target_bytes: int) -> bytes:
    """A grey PNG of random pixels (incompressible) just under ``target_bytes``."""
    from PIL import Image

    rng = np.random.default_rng(7)
    side = math.isqrt(int(target_bytes * 0.98))
    side = min(side, math.isqrt(MAX_IMAGE_PIXELS))
    pixels = rng.integers(0, 256, size=(side, side), dtype=np.uint8)
    out = io.BytesIO()
    Image.fromarray(pixels, mode="L").save(out, format="PNG", compress_level=1)
    return out.getvalue()


def test_the_caps_nest_image_in_snapshot_in_upload():
    rest = 512 * 1024  # room for everything else in the snapshot
    assert _base64_size(MAX_IMAGE_BYTES) + len(PREFIX) + rest <= snapshot.MAX_SNAPSHOT_BYTES
    # An imported snapshot reaches the server base64-encoded inside one websocket message.
    assert _base64_size(snapshot.MAX_SNAPSHOT_BYTES) < serving.MAX_MESSAGE_BYTES


def test_a_snapshot_with_an_image_at_the_size_cap_is_read_back(tmp_path):
    png = _noise_png(MAX_IMAGE_BYTES)
    assert 0.9 * MAX_IMAGE_BYTES < len(png) <= MAX_IMAGE_BYTES
    doc = json.loads(snapshot.dumps(load_preset(None)))
    url = PREFIX + base64.b64encode(png).decode("ascii")
    doc["aperture"]["elements"] = [
        {"shape": "image", "x": 0, "y": 0, "width": 1e-3, "height": 1e-3, "data": url}
    ]
    path = tmp_path / "big-image.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    assert path.stat().st_size <= snapshot.MAX_SNAPSHOT_BYTES
    setup = snapshot.load(str(path))
    assert setup.aperture.elements[0].shape == "image"


# ------------------------------------------------------------- documented ranges

_TABLES = {
    # section heading in docs/snapshot.md -> (path in a snapshot document, model class)
    "## `source`": ("source", model.Source),
    "## `screen`": ("screen", model.Screen),
    "## `camera`": ("camera", model.Camera),
    "### Keys of every element": ("aperture.elements[0]", model.Rect),
}


def _doc_rows() -> list[tuple[str, str, str]]:
    """(section, key, range cell) of every row with a numeric range in the tables above."""
    rows, section = [], None
    for line in DOC.read_text(encoding="utf-8").splitlines():
        if line.startswith("#"):
            section = line.strip() if line.strip() in _TABLES else None
            continue
        if section is None or not line.startswith("| `"):
            continue
        cells = [c.strip() for c in line.strip("|").split("|")]
        keys = re.findall(r"`(\w+)`", cells[0])
        interval = re.search(r"[\[(][^\])]*[\])]", cells[2])
        if interval is None:
            continue
        rows.extend((section, key, interval.group(0)) for key in keys)
    return rows


def _shape_rows() -> list[tuple[str, str, str]]:
    """(shape, key, range) of the sizes in the table of shapes.

    A note either names its keys (`diameter` in [a, b] m) or gives one range for
    all the shape's sizes.
    """
    rows = []
    text = DOC.read_text(encoding="utf-8")
    table = text.split("### Keys of each shape", 1)[1].split("\n## ", 1)[0]
    for line in table.splitlines():
        m = re.match(r"\| `(\w+)` \| ([^|]*) \| (.*) \|$", line)
        if m is None:
            continue
        shape, keys, notes = m.groups()
        named = re.findall(r"((?:`\w+`(?:, )?)+) in ([\[(][^\])]*[\])])", notes)
        for names, interval in named:
            rows.extend((shape, k, interval) for k in re.findall(r"`(\w+)`", names))
        if not named:
            interval = re.search(r"[\[(][-\d.e]+, [-\d.e]+[\])] m", notes)
            if interval is not None:
                for key in re.findall(r"`(\w+)`", keys):
                    rows.append((shape, key, interval.group(0)[:-2]))
    return rows


def _message_for(path: str, key: str, value: float) -> str:
    doc = json.loads(snapshot.dumps(load_preset(None)))
    doc["camera"] = json.loads(snapshot.dumps(_with_camera(load_preset(None)))).get("camera")
    target = doc
    for part in path.split("."):
        m = re.fullmatch(r"(\w+)\[(\d+)\]", part)
        target = target[m.group(1)][int(m.group(2))] if m else target[part]
    target[key] = value
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(json.dumps(doc))
    return str(info.value)


def _with_camera(setup):
    setup.camera = model.Camera(pixel_pitch=5e-6, pixels_x=64, pixels_y=64)
    return setup


def _too_far(p) -> float:
    lo, hi = p.bounds
    return hi * 10 + 1 if hi is not None else lo - 1


def test_the_reference_lists_the_ranges_of_the_tables():
    sections = {s for s, _, _ in _doc_rows()}
    assert sections == set(_TABLES)  # every table was found and read
    assert len(_doc_rows()) >= 25 and len(_shape_rows()) >= 3


@pytest.mark.parametrize(("section", "key", "documented"), _doc_rows())
def test_each_documented_range_is_the_one_an_error_names(section, key, documented):
    path, cls = _TABLES[section]
    p = cls.param[key]
    message = _message_for(path, key, _too_far(p))
    assert documented in message, (key, documented, message)


_SHAPE_KEYS = {
    "rect": {"width": 1e-3, "height": 1e-3},
    "circle": {"diameter": 1e-3},
    "annulus": {"diameter": 2e-3, "inner_diameter": 1e-3},
    "grating": {"count": 2, "period": 2e-3, "width": 1e-3, "height": 1e-3},
}


@pytest.mark.parametrize(("shape", "key", "documented"), _shape_rows())
def test_each_documented_shape_size_is_the_one_an_error_names(shape, key, documented):
    doc = json.loads(snapshot.dumps(load_preset(None)))
    element = {"shape": shape, "x": 0, "y": 0, **_SHAPE_KEYS[shape]}
    element[key] = -1.0  # below every size range
    doc["aperture"]["elements"] = [element]
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(json.dumps(doc))
    assert documented in str(info.value), (shape, key, documented, str(info.value))
