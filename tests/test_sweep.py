"""`pfcrig sweep`: the default grid, the figures of each point against textbook relations, the
light-load point that once limit-cycled, and the command's refusals."""

from __future__ import annotations

import json
import math

import pytest

from design.project import load_project
from harness.campaigns import sweep

from .helpers import EXAMPLES
from .test_cli_design import pfcrig

APPLIANCE = EXAMPLES / "appliance_1k2.toml"
TELECOM = EXAMPLES / "telecom_3k3.toml"


def test_default_grid_spans_the_range_with_the_common_lines():
    """8 steps over [vin_rms_min, vin_rms_max], ends kept, 115 V and 230 V on the grid when
    they lie in the range (and only then)."""
    for path, mark, absent in ((APPLIANCE, 115.0, 230.0), (TELECOM, 230.0, 115.0)):
        prj = load_project(path)
        spec = prj.config.spec
        v = sweep.default_vrms(prj)
        assert len(v) == sweep.GRID_STEPS
        assert v[0] == spec.vin_rms_min and v[-1] == spec.vin_rms_max
        assert mark in v and absent not in v
        assert list(v) == sorted(v)
    pts = sweep.grid((100.0, 120.0), (0.1, 1.0), (50.0, 60.0))
    assert len(pts) == 8 and len(set(pts)) == 8


@pytest.mark.slow
def test_points_obey_the_power_factor_identity_and_light_load_has_no_limit_cycle():
    """Each point's PF equals displacement factor x distortion factor, cos(phi1) /
    sqrt(1 + THD^2) with the total harmonic distortion (the identity for a sinusoidal line
    voltage; Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., ch. 18,
    from memory) within 1 %: a current with content outside the harmonics (a limit cycle of
    the synchronous switch at light load gave PF 0.63 and THD 21 % at 140 V, 10 % load on
    this design, PF far below the identity) fails it.  Efficiency is p_out/p_in."""
    prj = load_project(APPLIANCE)
    pts = sweep.grid((85.0, 140.0), (0.1, 1.0), (60.0,))
    recs, _ = sweep.sweep(prj, pts, batch=4, log=lambda m: None)
    assert [(r["vrms_V"], r["load_frac"]) for r in recs] == [(p.vrms_V, p.load_frac) for p in pts]
    for r in recs:
        assert r["steady"], r["steady_reason"]
        rep_pf = r["displacement_factor"] / math.sqrt(1.0 + r["thd_total"] ** 2)
        assert r["pf"] == pytest.approx(rep_pf, rel=0.01), r
        assert r["efficiency"] == pytest.approx(r["p_out_W"] / r["p_in_W"])
        assert r["p_out_W"] == pytest.approx(r["load_frac"] * prj.config.spec.power, rel=0.03)
        assert r["pf"] > 0.98, r  # the limit cycle's absence, see the docstring


def test_sweep_refuses_a_grid_outside_the_design(tmp_path):
    r = pfcrig("sweep", str(APPLIANCE), "--vrms", "115,230")
    assert r.returncode == 2
    assert "230 V is outside the design's line range 85..140" in r.stderr
    r = pfcrig("sweep", str(APPLIANCE), "--freq", "400")
    assert r.returncode == 2 and "400 Hz is outside the accepted band" in r.stderr
    r = pfcrig("sweep", str(APPLIANCE), "--load", "0,50")
    assert r.returncode == 2 and "out of range" in r.stderr
    r = pfcrig("sweep", str(APPLIANCE), "--load", "150")
    assert r.returncode == 2 and "out of range" in r.stderr


@pytest.mark.slow
def test_sweep_command_writes_points_and_plots(tmp_path):
    out, plots = tmp_path / "sweep.json", tmp_path / "plots"
    r = pfcrig(
        "sweep",
        str(TELECOM),
        "--vrms",
        "230",
        "--load",
        "20,100",
        "--workers",
        "1",
        "--json",
        str(out),
        "--plot",
        str(plots),
    )
    assert r.returncode == 0, r.stderr
    doc = json.loads(out.read_text())
    assert [p["load_frac"] for p in doc["points"]] == [0.2, 1.0]
    for p in doc["points"]:
        for key in ("vrms_V", "load_frac", "freq_Hz", "pf", "thd_i", "efficiency"):
            assert isinstance(p[key], float), key
        assert p["class_a_applicable"] in (True, False)
    assert doc["firmware_digest"] and doc["config_digest"]
    pngs = sorted(x.name for x in plots.iterdir())
    assert pngs == ["sweep_50Hz_figures.png", "sweep_50Hz_maps.png"]
    assert all((plots / n).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for n in pngs)
