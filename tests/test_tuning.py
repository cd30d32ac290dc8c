"""Loop tuning against python-control: the crossover and margins the design reports are
recomputed by ``control.stability_margins`` on the exact sampled loops, built here from
their difference equations (not from the design's polynomials):

* current loop: centre-aligned PWM sampled at mid-period, the compare taking effect at the
  next period start, so ``i[k+1] = i[k] + (K T/2) (d[k] + d[k-1])`` with ``K = Vo/L`` (the
  averaged boost, Erickson & Maksimovic, Fundamentals of Power Electronics, averaged switch
  models); edge-aligned PWM sampled at half the low switch's on-time, at its worst point (no
  main on-time before the sample), ``i[k+1] = i[k] + K T d[k-1]``;
* voltage loop: the power command held over a block of ``Th/8``, the bus ``K/s`` with
  ``K = eta/(C Vo)``, averaged over the last 8 block means (a sliding half line cycle).

Both with the backward-Euler PI ``C(z) = kp + ki T z/(z - 1)``."""

from __future__ import annotations

import numpy as np
import pytest

from design.config import ConfigError, load
from design.project import from_config, load_project
from design.tuning import BUS_BLOCKS

from .helpers import DEMO, EXAMPLES

control = pytest.importorskip("control", reason="python-control (package 'control') not installed")

CONFIGS = [
    (DEMO, "centre"),
    (EXAMPLES / "telecom_3k3.toml", "centre"),
    (EXAMPLES / "appliance_1k2.toml", "centre"),
    (DEMO, "edge"),
    (EXAMPLES / "appliance_1k2.toml", "edge"),
]


def ids(c):
    return f"{c[0].stem}-{c[1]}"


def tuning_of(cfg_carrier):
    cfg, carrier = cfg_carrier
    prj = load_project(cfg)
    if prj.config.control.carrier != carrier:
        prj = from_config(prj.config.replace("control", carrier=carrier))
    return prj.tuning


def sampled_plant(loop: str, lp, carrier: str = "centre"):
    T, K = lp.ts_s, lp.plant_gain
    z = control.tf([1, 0], [1], T)
    if loop == "current" and carrier == "edge":
        # i[k+1] - i[k] = K T d[k-1]  ->  (z - 1) I = K T D/z
        return K * T / (z * (z - 1))
    if loop == "current":
        # i[k+1] - i[k] = (K T/2)(d[k] + d[k-1])  ->  (z - 1) I = (K T/2)(1 + 1/z) D
        return (K * T / 2) * (z + 1) / (z * (z - 1))
    # v_end[n+1] = v_end[n] + K T p[n]; block mean b[n+1] = v_end[n] + K T p[n]/2;
    # window mean a[n] = (1/8) sum_{k<8} b[n-k]
    vend = K * T / (z - 1)
    b = (vend + K * T / 2) / z
    window = sum(z ** (-k) for k in range(BUS_BLOCKS)) / BUS_BLOCKS
    return b * window


def margins_by_python_control(loop: str, lp, carrier: str = "centre"):
    """(crossover Hz, phase margin deg, gain margin dB) of one loop, by python-control."""
    T = lp.ts_s
    pi = control.tf([lp.kp + lp.ki * T, -lp.kp], [1, -1], T)
    w = np.logspace(
        np.log10(2 * np.pi * lp.target_crossover_Hz) - 3, np.log10(np.pi / T * 0.999), 20000
    )
    resp = np.asarray((pi * sampled_plant(loop, lp, carrier)).frequency_response(w).complex)
    resp = resp.ravel()
    gm, pm, _, _, wgc, _ = control.stability_margins(control.frd(resp, w))
    return wgc / (2 * np.pi), pm, 20 * np.log10(gm)


@pytest.mark.parametrize("cfg", CONFIGS, ids=ids)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_reported_margins_match_python_control(cfg, loop):
    lp = getattr(tuning_of(cfg), loop)
    fc, pm, gm = margins_by_python_control(loop, lp, cfg[1])
    assert lp.crossover_Hz == pytest.approx(fc, rel=1e-4)
    assert lp.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert lp.gain_margin_dB == pytest.approx(gm, abs=0.05)


@pytest.mark.parametrize("cfg", CONFIGS, ids=ids)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_tuned_loops_meet_their_targets(cfg, loop):
    """The PI placed on the sampled loop lands on the asked crossover and phase margin (to
    the grid's resolution), with a gain margin above 6 dB (common practice)."""
    lp = getattr(tuning_of(cfg), loop)
    fc, pm, gm = margins_by_python_control(loop, lp, cfg[1])
    assert fc == pytest.approx(lp.target_crossover_Hz, rel=1e-3)
    assert pm == pytest.approx(lp.target_phase_margin_deg, abs=0.1)
    assert gm > 6.0


def test_closed_current_loop_step_by_difference_equation():
    """The loop as the firmware runs it, stepped in plain Python (PI by backward Euler on the
    mid-period sample, duty applied from the next period), settles on a reference step, and
    its overshoot is the one python-control's closed loop of the same tuning shows."""
    lp = load_project(DEMO).tuning.current
    T, K = lp.ts_s, lp.plant_gain
    n = 400
    i, d_prev, x = 0.0, 0.0, 0.0
    out = []
    for _ in range(n):
        e = 1.0 - i
        x += lp.ki * T * e
        d = lp.kp * e + x
        i = i + K * T / 2 * (d + d_prev)
        d_prev = d
        out.append(i)
    pi = control.tf([lp.kp + lp.ki * T, -lp.kp], [1, -1], T)
    cl = control.feedback(pi * sampled_plant("current", lp), 1)
    _, y = control.step_response(cl, T=np.arange(n + 1) * T)
    assert abs(out[-1] - 1.0) < 1e-3
    assert max(out) == pytest.approx(float(np.max(y)), rel=1e-3)


def test_removed_delay_key_is_named(tmp_path):
    text = DEMO.read_text().replace("[control]", "[control]\ncontrol_delay_periods = 1.5", 1)
    (tmp_path / "x.toml").write_text(text)
    with pytest.raises(ConfigError, match="control_delay_periods was removed"):
        load(tmp_path / "x.toml")
