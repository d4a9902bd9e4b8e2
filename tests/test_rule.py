"""The rule: `auto` never returns a result its own report calls invalid while a valid
method fits the memory and time budget; where none does, the verdict is unmistakable
(Plan/Result ``verdict``, ``check``, ``render`` meta, ``--strict`` exit code 3, the
banner over the dashboard's map).

The property is a statement about our planner, not about published physics: common
practice, no source. The regimes it moves between are those of J. W. Goodman,
*Introduction to Fourier Optics*, 3rd ed., §4.2–4.3 (paraxial and far-field phases).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from benchsetup import bench
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compute import engine, model, planning, snapshot
from compute.errors import SetupError
from server import cli, views

FORCED = ("fraunhofer", "fresnel", "angular_spectrum", "rayleigh_sommerfeld")
LAM = 6.328e-7


def _fits(p: planning.Plan, memory_limit: int, time_budget: float) -> bool:
    return p.memory_bytes <= memory_limit and p.seconds <= time_budget


def _valid_elsewhere(setup: model.Setup, memory_limit: int, time_budget: float) -> list[str]:
    """Methods, tried one by one, whose report holds within the budget."""
    found = []
    for m in FORCED:
        s = snapshot.from_dict(snapshot.to_dict(setup))
        s.numerics.method = m
        try:
            p = planning.plan(s, memory_limit=memory_limit, time_budget=time_budget)
        except SetupError:
            continue  # refused: over the memory limit or absurd sizes
        if p.verdict != "invalid" and _fits(p, memory_limit, time_budget):
            found.append(m)
    # The non-paraxial far field has no name in numerics.method: the planner lists it.
    for p in planning.alternatives(setup, memory_limit=memory_limit, time_budget=time_budget):
        valid = p.verdict != "invalid" and _fits(p, memory_limit, time_budget)
        if p.variant == "far_field_nonparaxial" and valid:
            found.append("far_field_nonparaxial")
    return found


def _aperture(kind: str, size: float, aspect: float, offset: float):
    if kind == "circle":
        return model.Circle(diameter=size, x=offset * size)
    if kind == "rect":
        return model.Rect(width=size, height=size * aspect, x=offset * size)
    return model.Annulus(diameter=size, inner_diameter=0.5 * size, y=offset * size)


@st.composite
def setups(draw):
    """Random benches: apertures of 2 to 3000 wavelengths, 0.003 to 300 D²/λ away,
    windows seeing 0.05° to 58°, square or a strip, opaque or clear background."""
    lam = draw(st.sampled_from([4.05e-7, 6.328e-7, 1.064e-6]))
    size = 10 ** draw(st.floats(0.3, 3.5)) * lam
    z = 10 ** draw(st.floats(-2.5, 2.5)) * size * size / lam
    # A window at most the model's 1 km (Screen.width's bound), whatever the angle.
    half = min(z * math.tan(math.radians(draw(st.floats(0.05, 58.0)))), 499.0)
    wide = draw(st.booleans())
    kind = draw(st.sampled_from(["circle", "rect", "annulus"]))
    ap = _aperture(kind, size, draw(st.floats(0.2, 5.0)), draw(st.floats(-1.0, 1.0)))
    return bench(
        ap,
        wavelength=lam,
        distance=max(z, 1e-6),
        width=max(2.0 * half, 1e-8),
        height=max(2.0 * half * (1.0 if wide else 0.05), 1e-8),
        samples=draw(st.integers(4, 96)),
        x=draw(st.sampled_from([0.0, 0.3 * half])),
        background="clear" if draw(st.booleans()) else "opaque",
    )


@settings(
    max_examples=150,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
@given(
    setup=setups(), memory_mib=st.sampled_from([64, 512, 2048]), budget=st.sampled_from([0.2, 20.0])
)
def test_auto_is_valid_or_no_valid_method_fits(setup, memory_mib, budget):
    limit = memory_mib * 2**20
    try:
        p = planning.plan(setup, memory_limit=limit, time_budget=budget)
    except SetupError:
        return  # refused with a message: `auto` returned nothing
    assert p.verdict in ("ok", "marginal", "invalid")
    if p.verdict != "invalid":
        assert all(v.verdict in ("ok", "marginal") for v in p.validity)
        return
    # Invalid: visible on the plan, in its reasons or by a shared item (the screen's
    # pixels or the angle) that no method changes, and no other method is valid.
    assert any(v.verdict == "invalid" for v in p.validity)
    assert _valid_elsewhere(setup, limit, budget) == []


def test_no_valid_method_within_the_budget_is_said_and_marked():
    # A 30 λ disc 100 λ before a window that sees 50°: the paraxial phases are far
    # above the limits, the angular spectrum exceeds 64 MiB and the direct sum 0.05 s.
    z = 100 * LAM
    w = 2 * z * math.tan(math.radians(50.0)) / math.sqrt(2.0)
    s = bench(model.Circle(diameter=30 * LAM), distance=z, width=w, samples=201)
    limit, budget = 64 * 2**20, 0.05
    p = planning.plan(s, memory_limit=limit, time_budget=budget)
    assert p.verdict == "invalid"
    assert any("no method is valid within" in r for r in p.reasons)
    assert _valid_elsewhere(s, limit, budget) == []
    # With the default budget the same setup has a valid method, and auto takes it.
    q = planning.plan(s)
    assert q.verdict != "invalid"
    assert _valid_elsewhere(s, planning.DEFAULT_MEMORY_LIMIT, planning.DEFAULT_TIME_BUDGET)


def test_auto_switches_away_from_an_invalid_preference_and_says_why():
    # A 30 λ disc 1000 λ before a strip that sees 50° on either side, under a 256 MiB
    # limit: the angular spectrum would need more, the paraxial forms are invalid at
    # that angle (Goodman §4.2, eq. 4-18), the direct sum is valid within the time
    # budget, and auto uses it.
    z = 1000 * LAM
    w = 2 * z * math.tan(math.radians(50.0))
    s = bench(model.Circle(diameter=30 * LAM), distance=z, width=w, height=w / 400 * 3, samples=400)
    limit = 256 * 2**20
    alts = {(a.method, a.variant): a for a in planning.alternatives(s)}
    spectrum = alts["angular_spectrum", "band_limited"]
    assert spectrum.verdict != "invalid" and spectrum.memory_bytes > limit
    assert alts["fresnel", "impulse_response"].verdict == "invalid"
    p = planning.plan(s, memory_limit=limit)
    assert (p.method, p.variant) == ("rayleigh_sommerfeld", "direct")
    assert p.verdict != "invalid"
    assert any("over the memory limit" in r and "is valid and fits" in r for r in p.reasons)
    # And the direct sum it returns is right: the Rayleigh–Sommerfeld reference at a few
    # pixels (Goodman §3.5), within 2 % of the on-axis irradiance.
    r = engine.compute(s, memory_limit=limit, use_cache=False)
    cols = np.array([0, 60, 150, 199, 260, 399])
    ref = np.abs(engine.field_at_points(s, r.x[cols], np.full(cols.size, r.y[1]))) ** 2
    assert np.max(np.abs(r.intensity[1, cols] - ref)) < 0.02 * ref[3]


def _invalid_snapshot(tmp_path):
    # Forced Fraunhofer 5 cm behind a 1 mm disc: the quadratic phase it drops is about
    # 50 rad (Goodman §4.3), so its own report says invalid.
    s = bench(model.Circle(diameter=1e-3), distance=0.05, width=2e-3, samples=128)
    s.numerics.method = "fraunhofer"
    path = tmp_path / "invalid.json"
    snapshot.save(s, path)
    return s, path


def test_result_meta_and_check_carry_the_verdict(tmp_path, capsys):
    s, path = _invalid_snapshot(tmp_path)
    r = engine.compute(s, use_cache=False)
    assert r.verdict == "invalid"
    assert r.meta()["verdict"] == "invalid"
    out = tmp_path / "r.npz"
    assert cli.main(["render", str(path), "--out", str(out)]) == 0
    meta = json.loads(str(np.load(out)["meta"]))
    assert meta["verdict"] == "invalid"
    assert "verdict invalid" in capsys.readouterr().out
    assert cli.main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    assert "verdict         invalid" in text and "VERDICT INVALID" in text
    assert cli.main(["check", str(path), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["verdict"] == "invalid"


def test_strict_refuses_an_invalid_result_with_exit_code_3(tmp_path, capsys):
    _, path = _invalid_snapshot(tmp_path)
    out = tmp_path / "r.npz"
    assert cli.main(["render", str(path), "--out", str(out), "--strict"]) == cli.EXIT_INVALID == 3
    err = capsys.readouterr().err
    assert err.startswith("error: verdict invalid") and "Quadratic phase" in err
    assert not out.exists()
    assert cli.main(["check", str(path), "--strict"]) == 3
    # A valid setup passes --strict; bad input stays exit code 2.
    good = tmp_path / "good.json"
    snapshot.save(bench(model.Circle(diameter=1e-3), distance=50.0, width=0.1, samples=32), good)
    assert cli.main(["render", str(good), "--out", str(out), "--strict"]) == 0
    assert out.exists()
    assert cli.main(["render", str(tmp_path / "missing.json"), "--out", str(out), "--strict"]) == 2


def test_banner_over_the_map_follows_the_verdict():
    import server.app  # noqa: F401  (loads the plotting extension, as the app does)
    from server.dashboard import Dashboard

    s = bench(model.Circle(diameter=1e-3), distance=0.05, width=2e-3, samples=128)
    s.numerics.method = "fraunhofer"
    d = Dashboard(s, threaded=False)
    assert d.result is not None and d.result.verdict == "invalid"
    assert d.verdict_banner.visible
    assert 'data-verdict="invalid"' in d.verdict_banner.object
    assert "Quadratic phase dropped by Fraunhofer" in d.verdict_banner.object
    assert 'data-verdict="invalid"' in d.state_pane.object
    assert d.set_value("numerics.method", "auto")
    assert d.result.verdict != "invalid"
    assert not d.verdict_banner.visible
    assert views.verdict_banner(d.result.plan) == ""


@pytest.mark.parametrize("name", ["default", "knife-edge", "pinhole-filter", "talbot-grating"])
def test_presets_keep_their_method_and_a_valid_verdict(name):
    # The presets were all valid before the rule; it leaves them as they were.
    from pathlib import Path

    path = Path(__file__).resolve().parent.parent / "presets" / f"{name}.json"
    p = engine.check(snapshot.load(path))
    assert p.verdict == "ok"
    assert p.method in ("fraunhofer", "fresnel", "angular_spectrum")
