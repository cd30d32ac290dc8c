"""Closed loop: the compiled generated controller against the switching plant (demo config).

Acceptance figures (targets of the project, checked against independent relations):
PF and THD by the IEC 61000-4-7 window DFT, Class A by the IEC 61000-3-2 table, the
inductor ripple against the boost CCM relation v(1 - v/Vo)/(L fsw) and the bus ripple
against P/(2 pi f C Vo) (Erickson & Maksimovic, Fundamentals of Power Electronics).
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from harness.closedloop import metrics
from harness.closedloop.loop import run
from harness.closedloop.report import lane_report
from harness.closedloop.scenario import Scenario

from .helpers import DEMO

KEYS = [
    "pf",
    "thd_i",
    "vbus_mean_V",
    "vbus_ripple_pp_V",
    "vbus_min_V",
    "vbus_max_V",
    "il_peak_A",
    "class_a_pass",
    "harmonics_A",
    "efficiency",
]


@pytest.fixture(scope="module")
def high_line(demo_project):
    s = Scenario(
        duration_s=0.5, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    return run(demo_project, [s], progress=False)


@pytest.fixture(scope="module")
def low_line(demo_project):
    s = Scenario(
        duration_s=0.5, vrms_V=115.0, freq_Hz=60.0, load_kind="resistive", load_power_W=750.0
    )
    return run(demo_project, [s], progress=False)


@pytest.mark.slow
def test_230V_50Hz_full_load(high_line, demo_project):
    rep = lane_report(high_line)
    spec = demo_project.config.spec
    assert rep["pf"] >= 0.99
    assert rep["thd_i"] <= 0.05
    assert abs(rep["vbus_mean_V"] - spec.vout) <= 0.01 * spec.vout
    assert rep["vbus_ripple_pp_V"] <= 1.10 * spec.ripple_voltage_pp * spec.vout
    assert rep["class_a_pass"]
    assert rep["whole_run"]["final_mode"] == "run" and rep["whole_run"]["faults_seen"] == []
    assert rep["whole_run"]["shoot_through_periods"] == 0
    for k in KEYS:
        assert k in rep
    assert len(rep["harmonics_A"]) == 40


@pytest.mark.slow
def test_ripple_matches_formulas(high_line):
    rep = lane_report(high_line)
    # inductor: v(1 - v/Vo)/(L fsw) at the line peak and the measured bus
    assert rep["il_ripple_at_peak_A"] == pytest.approx(rep["il_ripple_formula_A"], rel=0.10)
    # bus: P/(2 pi f C Vo) with the delivered power
    assert rep["vbus_ripple_pp_V"] == pytest.approx(rep["vbus_ripple_formula_V"], rel=0.10)


@pytest.mark.slow
def test_115V_60Hz_half_load(low_line):
    rep = lane_report(low_line)
    assert rep["pf"] >= 0.98
    assert rep["thd_i"] <= 0.08
    assert rep["whole_run"]["final_mode"] == "run"


@pytest.mark.slow
def test_averaged_model_tracks_switching_model(high_line, demo_project):
    avg = run(demo_project, high_line.scenarios, model="averaged", progress=False)
    t = high_line.data["t_s"][:, 0]
    w = metrics.window_slice(t, 50.0)
    a = avg.data["i_avg_A"][w, 0]
    b = high_line.data["i_avg_A"][w, 0]
    # period-averaged line current: rms difference within 2 % of the rms, fundamental within 0.5 %
    assert np.sqrt(np.mean((a - b) ** 2)) <= 0.02 * np.sqrt(np.mean(b**2))
    v = high_line.data["vs_V"][w, 0]
    fa = metrics.power_quality(v, a, 65000.0, 50.0)["harmonics_A"][0]
    fb = metrics.power_quality(v, b, 65000.0, 50.0)["harmonics_A"][0]
    assert fa == pytest.approx(fb, rel=0.005)


def test_cli_run_writes_json_csv_plots(tmp_path):
    out = tmp_path / "r.json"
    r = subprocess.run(
        [
            sys.executable,
            "-m",
            "harness.cli",
            "run",
            str(DEMO),
            "--model",
            "averaged",
            "--duration",
            "0.12",
            "--json",
            str(out),
            "--csv",
            str(tmp_path / "w.csv"),
            "--plot",
            str(tmp_path / "p"),
            "--quiet",
        ],
        capture_output=True,
        text=True,
    )
    assert r.returncode == 0, r.stderr
    rep = json.loads(out.read_text())
    for k in KEYS:
        assert k in rep
    assert (tmp_path / "w.csv").read_text().startswith("t_s,")
    assert sorted(p.name for p in (tmp_path / "p").iterdir()) == [
        "bus_duty_mode.png",
        "harmonics.png",
        "line.png",
    ]
    assert "PF" in r.stdout and "THD" in r.stdout
