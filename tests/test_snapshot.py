"""Snapshot reading and writing (version 1): round trips, every error class, the hash."""

from __future__ import annotations

import base64
import copy
import io
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from PIL import Image as PILImage

from compute import snapshot
from compute.model import Circle, Rect, Screen, Setup
from compute.pngdata import MAX_IMAGE_PIXELS, encode_png_data_url

ROOT = Path(__file__).resolve().parent.parent


def _png_url(width: int, height: int) -> str:
    buf = io.BytesIO()
    PILImage.new("L", (width, height), 200).save(buf, format="PNG")
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def base_doc() -> dict:
    """A small valid snapshot (our own numbers), every optional key left out."""
    return {
        "format": "fringebench-snapshot",
        "version": 1,
        "meta": {"title": "Two slits", "created": "2026-12-01T09:30:00Z"},
        "source": {"kind": "plane", "wavelength": 5.5e-7, "irradiance": 40.0},
        "aperture": {
            "background": "opaque",
            "elements": [
                {"shape": "rect", "x": -1e-4, "y": 0.0, "width": 4e-5, "height": 1e-3},
                {"shape": "rect", "x": 1e-4, "y": 0.0, "width": 4e-5, "height": 1e-3},
            ],
        },
        "screen": {"distance": 0.8, "width": 0.01, "height": 0.004, "samples": 120},
        "numerics": {},
    }


def all_shapes_doc() -> dict:
    """Every shape, a Gaussian source and a lens, every key spelled out."""
    doc = base_doc()
    doc["source"] = {
        "kind": "gaussian",
        "wavelength": 1.064e-6,
        "irradiance": 5.0,
        "power": 0.02,
        "waist": 2e-3,
        "waist_offset": -0.3,
        "distance": 0.5,
        "tilt_x": 1e-3,
        "tilt_y": -2e-3,
    }
    common = {"angle": 0.3, "transmission": 0.8, "phase": 1.5}
    doc["aperture"] = {
        "background": "clear",
        "elements": [
            {"shape": "rect", "x": 0.0, "y": 1e-4, "width": 1e-4, "height": 2e-4, **common},
            {"shape": "circle", "x": 2e-4, "y": 0.0, "diameter": 3e-4, **common},
            {
                "shape": "annulus",
                "x": 0.0,
                "y": 0.0,
                "diameter": 1e-3,
                "inner_diameter": 5e-4,
                **common,
            },
            {
                "shape": "grating",
                "x": 0.0,
                "y": -1e-3,
                "count": 7,
                "period": 5e-5,
                "width": 2e-5,
                "height": 4e-4,
                **common,
            },
            {"shape": "edge", "x": 1e-3, "y": 0.0, **common},
            {
                "shape": "polygon",
                "x": 0.0,
                "y": 0.0,
                "vertices": [[0.0, 0.0], [1e-4, 0.0], [0.0, 2e-4]],
                **common,
            },
            {
                "shape": "image",
                "x": 0.0,
                "y": 0.0,
                "data": encode_png_data_url([[0.0, 1.0], [0.5, 0.25]]),
                "width": 2e-4,
                "height": 2e-4,
                **common,
            },
        ],
    }
    doc["screen"] = {
        "distance": 0.25,
        "width": 0.004,
        "height": 0.002,
        "x": 1e-4,
        "y": -1e-4,
        "samples": 64,
        "lens_focal_length": 0.25,
    }
    doc["numerics"] = {"method": "fresnel", "grid": 256, "precision": "double"}
    doc["meta"] = {
        "title": "All shapes",
        "note": "test",
        "created": "2026-12-01T09:30:00+01:00",
        "app_version": "0.1.0",
    }
    doc["view"] = {"scale": "log", "cut": [0.0, 1e-4], "nested": {"a": [True, None, "x"]}}
    return doc


def errors_of(doc) -> list[tuple[str, str]]:
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    assert info.value.errors, "a SnapshotError must list its problems"
    return info.value.errors


def messages_at(errors, path) -> list[str]:
    return [m for p, m in errors if p == path]


# -- round trips --------------------------------------------------------------------


@pytest.mark.parametrize("make", [base_doc, all_shapes_doc])
def test_round_trip_setup_snapshot_setup(make):
    setup = snapshot.from_dict(make())
    doc = snapshot.to_dict(setup)
    again = snapshot.from_dict(doc)
    assert snapshot.to_dict(again) == doc
    assert snapshot.to_dict(snapshot.loads(snapshot.dumps(setup))) == doc


def test_to_dict_writes_every_key_and_the_given_values():
    doc = all_shapes_doc()
    out = snapshot.to_dict(snapshot.from_dict(doc))
    # Everything written in the complete document comes back unchanged.
    assert out == doc


def test_defaults_fill_optional_keys():
    doc = base_doc()
    out = snapshot.to_dict(snapshot.from_dict(doc))
    el = out["aperture"]["elements"][0]
    assert (el["angle"], el["transmission"], el["phase"]) == (0.0, 1.0, 0.0)
    assert (out["screen"]["x"], out["screen"]["y"]) == (0.0, 0.0)
    assert out["screen"]["lens_focal_length"] is None
    assert out["numerics"] == {"method": "auto", "grid": 0, "precision": "single"}
    assert out["view"] == {}
    assert set(out) == {
        "format",
        "version",
        "meta",
        "source",
        "aperture",
        "screen",
        "numerics",
        "view",
    }


def test_meta_and_view_are_optional_and_kept():
    doc = base_doc()
    del doc["meta"]
    setup = snapshot.from_dict(doc)
    assert setup.meta == {} and setup.view == {}
    doc = all_shapes_doc()
    setup = snapshot.from_dict(doc)
    assert setup.view == doc["view"]
    assert setup.meta == doc["meta"]


def test_ints_accepted_for_float_fields_and_written_as_floats():
    doc = base_doc()
    doc["screen"]["distance"] = 2
    doc["source"]["irradiance"] = 40
    out = snapshot.to_dict(snapshot.from_dict(doc))
    assert out["screen"]["distance"] == 2.0 and isinstance(out["screen"]["distance"], float)
    assert isinstance(out["source"]["irradiance"], float)
    assert isinstance(out["screen"]["samples"], int)


def test_source_keys_of_other_kinds_are_allowed_and_kept():
    doc = base_doc()
    doc["source"]["power"] = 0.25  # a plane wave does not use it
    doc["source"]["waist"] = 3e-3
    out = snapshot.to_dict(snapshot.from_dict(doc))
    assert out["source"]["power"] == 0.25 and out["source"]["waist"] == 3e-3


def test_lens_focal_length_null_and_number():
    doc = base_doc()
    doc["screen"]["lens_focal_length"] = None
    assert snapshot.from_dict(doc).screen.lens_focal_length is None
    doc["screen"]["lens_focal_length"] = -0.5
    assert snapshot.from_dict(doc).screen.lens_focal_length == -0.5


def test_reading_does_not_change_the_input():
    doc = all_shapes_doc()
    before = copy.deepcopy(doc)
    snapshot.from_dict(doc)
    assert doc == before


def test_setup_built_in_python_round_trips():
    setup = Setup(screen=Screen(distance=3, samples=50))
    setup.aperture.elements = [Rect(width=1e-4), Circle(diameter=2e-4, x=-0.0)]
    doc = snapshot.to_dict(setup)
    assert doc["aperture"]["elements"][1]["x"] == 0.0
    assert snapshot.to_dict(snapshot.from_dict(doc)) == doc


def test_save_and_load(tmp_path):
    setup = snapshot.from_dict(all_shapes_doc())
    path = tmp_path / "s.json"
    snapshot.save(setup, path)
    assert path.read_text(encoding="utf-8").endswith("}\n")
    assert snapshot.to_dict(snapshot.load(path)) == snapshot.to_dict(setup)
    assert [p.name for p in tmp_path.iterdir()] == ["s.json"]  # no temporary left behind


def test_dumps_is_indented_json():
    text = snapshot.dumps(snapshot.from_dict(base_doc()))
    assert text.startswith('{\n  "format": "fringebench-snapshot",\n  "version": 1,')


# -- errors: one case per class, each with its exact path ------------------------------


def _set(path_value):
    """A mutation that sets ``doc[a][b]... = value`` along a key path."""
    *keys, value = path_value

    def mutate(doc):
        target = doc
        for k in keys[:-1]:
            target = target[k]
        target[keys[-1]] = value
        return doc

    return mutate


def _delete(*keys):
    def mutate(doc):
        target = doc
        for k in keys[:-1]:
            target = target[k]
        del target[keys[-1]]
        return doc

    return mutate


E0 = ("aperture", "elements", 0)
E1 = ("aperture", "elements", 1)

ERROR_CASES = [
    # (id, mutation, path, fragments that the message holds)
    ("unknown key", _set(("screen", "colour", "red")), "screen.colour", ["unknown key"]),
    ("unknown top key", _set(("extras", {})), "extras", ["unknown key"]),
    (
        "unknown element key",
        _set((*E0, "diameter", 1e-3)),
        "aperture.elements[0].diameter",
        ["unknown key", "width"],
    ),
    ("unknown meta key", _set(("meta", "author", "x")), "meta.author", ["unknown key"]),
    (
        "wrong type string",
        _set(("screen", "distance", "1.5")),
        "screen.distance",
        ['"1.5"', "a string", "number"],
    ),
    (
        "bool is no number",
        _set(("source", "wavelength", True)),
        "source.wavelength",
        ["true", "a boolean"],
    ),
    (
        "bool is no integer",
        _set(("screen", "samples", False)),
        "screen.samples",
        ["false", "integer"],
    ),
    (
        "float for integer",
        _set(("screen", "samples", 120.5)),
        "screen.samples",
        ["120.5", "integer"],
    ),
    ("null for number", _set(("screen", "width", None)), "screen.width", ["null"]),
    ("list for number", _set((*E1, "height", [1])), "aperture.elements[1].height", ["[1]"]),
    (
        "out of range low",
        _set((*E1, "width", -5e-5)),
        "aperture.elements[1].width",
        ["-5e-05", "[1e-10, 10] m"],
    ),
    (
        "zero width",
        _set((*E1, "width", 0)),
        "aperture.elements[1].width",
        ["got 0", "[1e-10, 10] m"],
    ),
    (
        "out of range high",
        _set(("source", "wavelength", 0.5)),
        "source.wavelength",
        ["0.5", "0.001"],
    ),
    ("huge integer", _set(("screen", "samples", 10**50)), "screen.samples", ["digits"]),
    (
        "transmission over 1",
        _set((*E0, "transmission", 1.5)),
        "aperture.elements[0].transmission",
        ["1.5", "[0, 1]"],
    ),
    ("python nan", _set((*E0, "x", math.nan)), "aperture.elements[0].x", ["NaN", "finite"]),
    (
        "python inf",
        _set(("screen", "distance", math.inf)),
        "screen.distance",
        ["Infinity", "finite"],
    ),
    (
        "unknown shape",
        _set((*E0, "shape", "hexagon")),
        "aperture.elements[0].shape",
        ['"hexagon"', "rect", "polygon"],
    ),
    ("shape not a string", _set((*E0, "shape", 3)), "aperture.elements[0].shape", ["3"]),
    ("unknown kind", _set(("source", "kind", "laser")), "source.kind", ['"laser"', "gaussian"]),
    (
        "unknown method",
        _set(("numerics", "method", "magic")),
        "numerics.method",
        ['"magic"', "angular_spectrum"],
    ),
    (
        "unknown background",
        _set(("aperture", "background", "grey")),
        "aperture.background",
        ['"grey"', "opaque"],
    ),
    ("missing required key", _delete("screen", "distance"), "screen.distance", ["missing"]),
    ("missing element key", _delete(*E1, "width"), "aperture.elements[1].width", ["missing"]),
    ("missing element centre", _delete(*E0, "x"), "aperture.elements[0].x", ["missing"]),
    ("missing shape", _delete(*E0, "shape"), "aperture.elements[0].shape", ["missing"]),
    ("missing wavelength", _delete("source", "wavelength"), "source.wavelength", ["missing"]),
    ("missing section", _delete("screen"), "screen", ["missing"]),
    ("missing elements", _delete("aperture", "elements"), "aperture.elements", ["missing"]),
    ("missing format", _delete("format"), "format", ["missing"]),
    ("wrong format", _set(("format", "other-program")), "format", ['"other-program"']),
    ("section not an object", _set(("screen", [1, 2])), "screen", ["object", "a list"]),
    (
        "element not an object",
        _set(("aperture", "elements", 1, "rect")),
        "aperture.elements[1]",
        ["object"],
    ),
    ("elements not a list", _set(("aperture", "elements", {})), "aperture.elements", ["list"]),
    ("meta not an object", _set(("meta", "title")), "meta", ["object"]),
    ("meta title not a string", _set(("meta", "title", 5)), "meta.title", ["string"]),
    (
        "created not ISO 8601",
        _set(("meta", "created", "last Tuesday")),
        "meta.created",
        ["ISO-8601", "last Tuesday"],
    ),
    ("view not an object", _set(("view", [])), "view", ["object"]),
    ("view holds NaN", _set(("view", {"a": [1, math.nan]})), "view.a[1]", ["NaN"]),
    (
        "lens not a number",
        _set(("screen", "lens_focal_length", "none")),
        "screen.lens_focal_length",
        ['"none"', "null"],
    ),
    ("tilt out of range", _set(("source", "tilt_x", 2.0)), "source.tilt_x", ["2", "rad"]),
]


@pytest.mark.parametrize(
    ("mutate", "path", "fragments"),
    [c[1:] for c in ERROR_CASES],
    ids=[c[0] for c in ERROR_CASES],
)
def test_error_names_path_value_and_expectation(mutate, path, fragments):
    errors = errors_of(mutate(base_doc()))
    found = messages_at(errors, path)
    assert found, f"no error at {path}: {errors}"
    for fragment in fragments:
        assert any(fragment in m for m in found), (fragment, found)


def test_string_of_error_joins_path_and_message():
    doc = _set((*E1, "width", -1.0))(base_doc())
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.from_dict(doc)
    assert isinstance(info.value, ValueError)
    assert str(info.value).startswith("aperture.elements[1].width: expected a number")


def test_all_errors_are_reported_together():
    doc = base_doc()
    doc["screen"]["distance"] = -1
    doc["screen"]["samples"] = "many"
    doc["aperture"]["elements"][0]["shape"] = "hexagon"
    doc["aperture"]["elements"][1]["height"] = math.nan
    doc["numerics"]["grid"] = 8.5
    doc["source"]["colour"] = "green"
    doc["view"] = 3
    paths = [p for p, _ in errors_of(doc)]
    assert set(paths) == {
        "screen.distance",
        "screen.samples",
        "aperture.elements[0].shape",
        "aperture.elements[1].height",
        "numerics.grid",
        "source.colour",
        "view",
    }
    assert len(paths) == 7


def test_required_keys_follow_the_source_kind():
    doc = base_doc()
    doc["source"] = {"kind": "gaussian", "wavelength": 5e-7, "power": 1e-3}
    assert messages_at(errors_of(doc), "source.waist") == ["missing required key"]
    doc["source"] = {"kind": "point", "wavelength": 5e-7, "power": 1e-3}
    assert messages_at(errors_of(doc), "source.distance") == ["missing required key"]
    doc["source"] = {"kind": "plane", "wavelength": 5e-7}
    assert messages_at(errors_of(doc), "source.irradiance") == ["missing required key"]


@pytest.mark.parametrize(
    ("element", "path", "fragment"),
    [
        (
            {"shape": "annulus", "x": 0, "y": 0, "diameter": 1e-3, "inner_diameter": 1e-3},
            "aperture.elements[0].inner_diameter",
            "smaller",
        ),
        (
            {
                "shape": "grating",
                "x": 0,
                "y": 0,
                "count": 3,
                "period": 1e-5,
                "width": 2e-5,
                "height": 1e-3,
            },
            "aperture.elements[0].width",
            "period",
        ),
        (
            {"shape": "polygon", "x": 0, "y": 0, "vertices": [[0, 0], [1e-4, 0], [2e-4, 0]]},
            "aperture.elements[0].vertices",
            "zero area",
        ),
        (
            {"shape": "polygon", "x": 0, "y": 0, "vertices": [[0, 0], [1e-4, 0]]},
            "aperture.elements[0].vertices",
            "got 2",
        ),
        (
            {"shape": "polygon", "x": 0, "y": 0, "vertices": [[0, 0], [1e-4, "a"], [0, 1e-4]]},
            "aperture.elements[0].vertices[1][1]",
            '"a"',
        ),
        (
            {"shape": "polygon", "x": 0, "y": 0, "vertices": [[0, 0], [1e-4], [0, 1e-4]]},
            "aperture.elements[0].vertices[1]",
            "[x, y]",
        ),
        (
            {"shape": "polygon", "x": 0, "y": 0, "vertices": [[0, 0], [20.0, 0], [0, 1e-4]]},
            "aperture.elements[0].vertices[1][0]",
            "[-10, 10] m",
        ),
    ],
    ids=[
        "annulus inner",
        "grating width",
        "polygon area",
        "polygon count",
        "vertex type",
        "vertex pair",
        "vertex range",
    ],
)
def test_shape_rules(element, path, fragment):
    doc = base_doc()
    doc["aperture"]["elements"] = [element]
    found = messages_at(errors_of(doc), path)
    assert any(fragment in m for m in found), found


def test_cross_rules_of_screen_and_numerics():
    doc = base_doc()
    doc["screen"]["lens_focal_length"] = 1e-9
    doc["numerics"]["grid"] = 8
    errors = errors_of(doc)
    assert messages_at(errors, "screen.lens_focal_length")
    assert messages_at(errors, "numerics.grid")


def test_cross_rules_still_run_beside_broken_elements():
    doc = base_doc()
    doc["aperture"]["elements"] = [
        {"shape": "hexagon"},
        {"shape": "annulus", "x": 0, "y": 0, "diameter": 1e-3, "inner_diameter": 2e-3},
    ]
    paths = [p for p, _ in errors_of(doc)]
    assert paths == ["aperture.elements[0].shape", "aperture.elements[1].inner_diameter"]


@pytest.mark.parametrize(
    ("data", "fragment"),
    [
        ("data:image/png;base64," + base64.b64encode(b"GIF89a" + bytes(40)).decode(), "not a PNG"),
        ("data:image/jpeg;base64,AAAA", "data:image/png;base64,"),
        ("data:image/png;base64,@@@@", "base64"),
        (_png_url(2049, 2048), "pixels"),
        (12, "a number"),
    ],
    ids=["not png", "not a png url", "bad base64", "over pixel cap", "not a string"],
)
def test_image_payload_errors(data, fragment):
    doc = base_doc()
    doc["aperture"]["elements"] = [
        {"shape": "image", "x": 0, "y": 0, "width": 1e-3, "height": 1e-3, "data": data}
    ]
    found = messages_at(errors_of(doc), "aperture.elements[0].data")
    assert any(fragment in m for m in found), found


def test_image_at_the_pixel_cap_is_accepted():
    side = math.isqrt(MAX_IMAGE_PIXELS)
    doc = base_doc()
    doc["aperture"]["elements"] = [
        {
            "shape": "image",
            "x": 0,
            "y": 0,
            "width": 1e-3,
            "height": 1e-3,
            "data": _png_url(side, side),
        }
    ]
    assert snapshot.from_dict(doc).aperture.elements[0].shape == "image"


# -- errors found while parsing text ------------------------------------------------------


def test_nan_and_infinity_tokens_are_named_by_path():
    text = json.dumps(base_doc())
    text = text.replace('"distance": 0.8', '"distance": NaN')
    text = text.replace('"irradiance": 40.0', '"irradiance": -Infinity')
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(text)
    errors = info.value.errors
    assert any("NaN" in m for m in messages_at(errors, "screen.distance"))
    assert any("-Infinity" in m for m in messages_at(errors, "source.irradiance"))


def test_overflowing_number_is_infinite():
    text = json.dumps(base_doc()).replace('"distance": 0.8', '"distance": 1e999')
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(text)
    assert any("Infinity" in m for m in messages_at(info.value.errors, "screen.distance"))


@pytest.mark.parametrize(
    ("text", "path", "fragment"),
    [
        ('{"format": ', "snapshot", "malformed JSON at line 1"),
        ("[1, 2]", "snapshot", "a list"),
        ('"text"', "snapshot", "a string"),
        ("", "snapshot", "malformed JSON"),
        ("[" * 100000 + "]" * 100000, "snapshot", "malformed JSON"),
    ],
    ids=["truncated", "list", "string", "empty", "nested too deep"],
)
def test_document_level_errors(text, path, fragment):
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(text)
    assert any(fragment in m for m in messages_at(info.value.errors, path)), info.value.errors


def test_duplicate_keys_are_refused_with_their_path():
    text = json.dumps(base_doc()).replace('"samples": 120', '"samples": 120, "samples": 90')
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(text)
    assert messages_at(info.value.errors, "screen.samples") == [
        "duplicate key; each key may appear once"
    ]


def test_bytes_must_be_utf8():
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.loads(b'{"format": "\xff"}')
    assert "UTF-8" in str(info.value)


# -- versions ---------------------------------------------------------------------------


def test_newer_version_is_refused_with_a_message_that_says_so():
    doc = base_doc()
    doc["version"] = 2
    doc["camera"] = {"pixels": 100}  # what a newer writer might add: not reported
    errors = errors_of(doc)
    assert [p for p, _ in errors] == ["version"]
    assert "newer" in errors[0][1] and "2" in errors[0][1]


@pytest.mark.parametrize("version", [0, -1])
def test_version_below_one_is_not_a_snapshot_version(version):
    doc = base_doc()
    doc["version"] = version
    (path, message), *_ = errors_of(doc)
    assert path == "version" and "not a fringebench snapshot version" in message


@pytest.mark.parametrize("version", ["1", 1.0, True, None])
def test_version_must_be_an_integer(version):
    doc = base_doc()
    doc["version"] = version
    assert messages_at(errors_of(doc), "version")


def test_missing_version():
    doc = base_doc()
    del doc["version"]
    assert messages_at(errors_of(doc), "version") == [
        "missing required key; this reader knows version 1"
    ]


def test_migrate_keeps_a_current_document_and_copies_it():
    doc = base_doc()
    out = snapshot.migrate(doc)
    assert out == doc and out is not doc
    out["screen"]["distance"] = 9.0
    assert doc["screen"]["distance"] == 0.8


def test_migrate_hook_runs_older_versions_through_each_step(monkeypatch):
    # Simulate a future version 2 reader: version 1 documents are migrated, not refused.
    def v1_to_v2(doc):
        doc = dict(doc, version=2)
        doc["screen"] = dict(doc["screen"], migrated=True)
        return doc

    monkeypatch.setattr(snapshot, "VERSION", 2)
    monkeypatch.setitem(snapshot._MIGRATIONS, 1, v1_to_v2)
    out = snapshot.migrate(base_doc())
    assert out["version"] == 2 and out["screen"]["migrated"] is True
    with pytest.raises(snapshot.SnapshotError):
        snapshot.migrate(dict(base_doc(), version=3))


# -- files --------------------------------------------------------------------------------


def test_load_missing_file(tmp_path):
    path = tmp_path / "nowhere.json"
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.load(path)
    assert info.value.errors == [(str(path), "no such file")]


def test_load_directory(tmp_path):
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.load(tmp_path)
    assert "directory" in str(info.value)


def test_load_refuses_files_over_5_mb(tmp_path):
    path = tmp_path / "big.json"
    text = json.dumps(base_doc())
    path.write_text(text + " " * (snapshot.MAX_SNAPSHOT_BYTES + 1 - len(text)))
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.load(path)
    ((where, message),) = info.value.errors
    assert where == str(path) and "5 MB" in message


def test_load_accepts_a_file_at_the_limit(tmp_path):
    path = tmp_path / "full.json"
    text = json.dumps(base_doc())
    path.write_text(text + " " * (snapshot.MAX_SNAPSHOT_BYTES - len(text)))
    assert snapshot.load(path).screen.samples == 120


def test_load_names_the_file_for_malformed_json(tmp_path):
    path = tmp_path / "bad.json"
    path.write_text('{"format": "fringebench-snapshot",\n "version": 1,,}')
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.load(path)
    ((where, message),) = info.value.errors
    assert where == str(path) and message.startswith("malformed JSON at line 2")


def test_load_field_errors_keep_their_key_path(tmp_path):
    path = tmp_path / "s.json"
    path.write_text(json.dumps(_set(("screen", "width", -2))(base_doc())))
    with pytest.raises(snapshot.SnapshotError) as info:
        snapshot.load(path)
    assert [p for p, _ in info.value.errors] == ["screen.width"]


# -- canonical form and hash ------------------------------------------------------------


def test_canonical_json_holds_the_physics_sections_sorted():
    setup = snapshot.from_dict(all_shapes_doc())
    text = snapshot.canonical_json(setup)
    data = json.loads(text)
    assert list(data) == ["aperture", "numerics", "screen", "source"]
    assert text == json.dumps(data, sort_keys=True, separators=(",", ":"))
    assert "meta" not in text and "view" not in text


def test_hash_ignores_view_meta_and_key_order():
    doc = all_shapes_doc()
    h = snapshot.physics_hash(snapshot.from_dict(doc))
    changed = copy.deepcopy(doc)
    changed["view"] = {"scale": "linear", "cmap": "viridis"}
    changed["meta"] = {"title": "renamed", "note": "other words"}
    assert snapshot.physics_hash(snapshot.from_dict(changed)) == h
    reordered = {k: doc[k] for k in reversed(list(doc))}
    reordered["screen"] = {k: doc["screen"][k] for k in reversed(list(doc["screen"]))}
    assert snapshot.physics_hash(snapshot.from_dict(reordered)) == h
    assert len(h) == 64 and int(h, 16) >= 0


def test_hash_normalises_numbers():
    doc = base_doc()
    h = snapshot.physics_hash(snapshot.from_dict(doc))
    same = copy.deepcopy(doc)
    same["screen"]["distance"] = 0.8000000000000000444  # the same double
    same["aperture"]["elements"][0]["y"] = -0.0
    same["aperture"]["elements"][0]["angle"] = 0  # int for a float field
    same["numerics"] = {"method": "auto", "grid": 0, "precision": "single"}  # the defaults
    assert snapshot.physics_hash(snapshot.from_dict(same)) == h
    assert not re.search(r"-0\.0(?![0-9e])", snapshot.canonical_json(snapshot.from_dict(same)))


@pytest.mark.parametrize(
    "mutate",
    [
        _set((*E1, "width", 4.1e-5)),
        _set(("screen", "distance", 0.8000000000000002)),  # the next double
        _set(("numerics", "precision", "double")),
        _set(("source", "power", 0.5)),
        _set(("screen", "samples", 121)),
    ],
    ids=["width", "one ulp", "precision", "unused source key", "samples"],
)
def test_hash_changes_with_the_physics(mutate):
    h = snapshot.physics_hash(snapshot.from_dict(base_doc()))
    assert snapshot.physics_hash(snapshot.from_dict(mutate(base_doc()))) != h


def test_hash_is_stable_across_processes(tmp_path):
    doc = all_shapes_doc()
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    here = snapshot.physics_hash(snapshot.from_dict(doc))
    code = (
        "import sys; from compute import snapshot; "
        "print(snapshot.physics_hash(snapshot.load(sys.argv[1])))"
    )
    seen = set()
    for seed in ("0", "12345"):
        env = dict(os.environ, PYTHONHASHSEED=seed, PYTHONPATH=str(ROOT))
        out = subprocess.run(
            [sys.executable, "-c", code, str(path)],
            env=env,
            cwd=ROOT,
            capture_output=True,
            text=True,
            check=True,
        )
        seen.add(out.stdout.strip())
    assert seen == {here}


def test_extreme_window_aspect_is_an_error_not_a_crash():
    doc = base_doc()
    doc["screen"]["width"] = 5e-324  # the smallest double: the pixel rows overflow
    doc["screen"]["height"] = 100.0
    errors = errors_of(doc)
    assert any(p.startswith("screen") for p, _ in errors), errors
