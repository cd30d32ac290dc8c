"""Loop tuning against python-control: the crossover and margins the design reports are
recomputed by ``control.stability_margins`` on the same loop (discrete PI by backward Euler,
``C(z) = kp + ki T z/(z - 1)``, in series with the averaged plant ``K/s`` and the delay
``exp(-s Td)``; Erickson & Maksimovic, Fundamentals of Power Electronics, averaged switch
models), and the tuned loops meet their targets."""

from __future__ import annotations

import numpy as np
import pytest

from design.project import load_project

from .helpers import DEMO, EXAMPLES

control = pytest.importorskip("control", reason="python-control (package 'control') not installed")

CONFIGS = [DEMO, EXAMPLES / "telecom_3k3.toml", EXAMPLES / "appliance_1k2.toml"]


def margins_by_python_control(lp):
    """(crossover Hz, phase margin deg, gain margin dB) of one LoopDesign's loop."""
    T = lp.ts_s
    pi = control.tf([lp.kp + lp.ki * T, -lp.kp], [1, -1], dt=T)
    plant = control.tf([lp.plant_gain], [1, 0])
    w = np.logspace(
        np.log10(2 * np.pi * lp.target_crossover_Hz) - 3, np.log10(np.pi / T * 0.999), 20000
    )
    resp = (
        np.asarray(pi.frequency_response(w).complex).ravel()
        * np.asarray(plant.frequency_response(w).complex).ravel()
        * np.exp(-1j * w * lp.delay_s)
    )
    gm, pm, _, _, wgc, _ = control.stability_margins(control.frd(resp, w))
    return wgc / (2 * np.pi), pm, 20 * np.log10(gm)


@pytest.mark.parametrize("cfg", CONFIGS, ids=lambda p: p.stem)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_reported_margins_match_python_control(cfg, loop):
    lp = getattr(load_project(cfg).tuning, loop)
    fc, pm, gm = margins_by_python_control(lp)
    assert lp.crossover_Hz == pytest.approx(fc, rel=1e-4)
    assert lp.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert lp.gain_margin_dB == pytest.approx(gm, abs=0.05)


@pytest.mark.parametrize("cfg", CONFIGS, ids=lambda p: p.stem)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_tuned_loops_meet_their_targets(cfg, loop):
    """The PI placed by the continuous-time rule lands near the asked crossover and phase
    margin once discretised (within 5 % and 1.5 deg: the backward-Euler integrator adds a
    little gain and phase), with a gain margin above 6 dB (common practice)."""
    lp = getattr(load_project(cfg).tuning, loop)
    fc, pm, gm = margins_by_python_control(lp)
    assert fc == pytest.approx(lp.target_crossover_Hz, rel=0.05)
    assert pm == pytest.approx(lp.target_phase_margin_deg, abs=1.5)
    assert gm > 6.0
