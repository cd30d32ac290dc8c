"""Loop gain measured by sine injection in the closed-loop switching run (``pfcrig
loopgain``) against the design's sampled-loop Bode, on the shipped examples; the margin
arithmetic on loops whose margins are known in closed form."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from design.project import load_project
from harness.cli import main
from harness.closedloop import loopgain as lg

from .helpers import DEMO, EXAMPLES


def test_margins_of_an_integrator_and_a_delayed_integrator():
    """T = wc/(jw): crossover wc, phase -90 everywhere (margin 90 deg), no -180 crossing.
    T = wc/(jw) exp(-jw tau): crossover wc, margin 90 - wc tau (rad to deg), and the phase
    reaches -180 at w180 = pi/(2 tau), where the gain margin is 20 log10(w180/wc)
    (hand arithmetic)."""
    fc = 1000.0
    f = np.logspace(2, 4.5, 400)
    w, wc = 2 * np.pi * f, 2 * np.pi * fc
    m = lg.margins_from_points(f, wc / (1j * w))
    assert m["crossover_Hz"] == pytest.approx(fc, rel=1e-3)
    assert m["phase_margin_deg"] == pytest.approx(90.0, abs=1e-6)
    assert m["gain_margin_dB"] is None
    tau = 1e-4
    m = lg.margins_from_points(f, wc / (1j * w) * np.exp(-1j * w * tau))
    assert m["phase_margin_deg"] == pytest.approx(90.0 - math.degrees(wc * tau), abs=0.1)
    w180 = math.pi / (2 * tau)
    assert m["gain_margin_dB"] == pytest.approx(20 * math.log10(w180 / wc), abs=0.05)


@pytest.mark.slow
@pytest.mark.parametrize("cfg", [EXAMPLES / "telecom_3k3.toml", EXAMPLES / "appliance_1k2.toml"])
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_measured_loop_matches_the_design(cfg, loop):
    """The loop the plant and the generated C form, measured as a bench analyser would,
    crosses over within 10 % of the design's crossover with a phase margin within 5 deg:
    the tuning's sampled-loop model is the loop that runs."""
    prj = load_project(cfg)
    res = lg.measure(prj, loop)
    m = res.figures()
    # the design at the measurement's operating point (rated load, nominal line: the current
    # reference's path through the filter at its gain there; the tuning places it at no load)
    lp = lg.design_at(prj, loop, res.scenario)
    assert res.design_figures["crossover_Hz"] == lp.crossover_Hz
    assert m["crossover_Hz"] == pytest.approx(lp.crossover_Hz, rel=0.10)
    assert m["phase_margin_deg"] == pytest.approx(lp.phase_margin_deg, abs=5.0)
    if loop == "current":  # the default points bracket the design's -180 deg crossing
        assert m["gain_margin_dB"] is not None
        assert m["gain_margin_dB"] == pytest.approx(lp.gain_margin_dB, abs=2.0)


def test_loopgain_cli_refuses_bad_points_and_events(tmp_path, capsys):
    assert main(["loopgain", str(DEMO), "--loop", "current", "--freqs", "40000"]) == 2
    assert "Nyquist" in capsys.readouterr().err
    scn = tmp_path / "s.toml"
    scn.write_text(
        'duration = 0.6\n[grid]\nvrms = 230.0\nfreq = 50.0\n[load]\nkind = "resistive"\n'
        'power = 1500.0\n[[event]]\nt = 0.5\nkind = "load"\npower = 700.0\n'
    )
    assert main(["loopgain", str(DEMO), "--loop", "voltage", "--scenario", str(scn)]) == 2
    assert "steady operating point" in capsys.readouterr().err


@pytest.mark.slow
def test_loopgain_cli_writes_json(tmp_path):
    out = tmp_path / "lg.json"
    code = main(
        [
            "loopgain",
            str(DEMO),
            "--loop",
            "current",
            "--freqs",
            "2000,4000,8000",
            "--json",
            str(out),
            "--quiet",
        ]
    )
    assert code == 0
    doc = json.loads(out.read_text())
    assert {"crossover_Hz", "phase_margin_deg", "gain_margin_dB", "points"} <= set(doc)
    assert [round(p["f_Hz"]) for p in doc["points"]] == [2000, 4000, 8000]
    assert doc["crossover_Hz"] is not None and 2000 < doc["crossover_Hz"] < 8000
