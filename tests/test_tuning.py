"""Loop tuning against python-control: the crossover and margins the design reports are
recomputed by ``control.stability_margins`` on the exact sampled loops, built here from
their difference equations (not from the design's polynomials):

* current loop: centre-aligned PWM sampled at mid-period, the compare taking effect at the
  next period start, so ``i[k+1] = i[k] + (K T/2) (d[k] + d[k-1])`` with ``K = Vo/L`` (the
  averaged boost, Erickson & Maksimovic, Fundamentals of Power Electronics, averaged switch
  models); edge-aligned PWM sampled at half the low switch's on-time, at its worst point (no
  main on-time before the sample), ``i[k+1] = i[k] + K T d[k-1]``;
* with an input filter (the demo and both examples), the current loop's plant is built from
  the circuit's impedances (grid, DM inductor with its damping resistor, X capacitor, boost
  inductor) as python-control transfer functions, sampled in closed form from their state
  space (scipy.linalg.expm) at the instants the carrier's edges and the sample take; the
  sampled X capacitor voltage comes back through the feedforward's first-order low-pass
  into the duty (``-|v|/Vo``) and the current reference (``P/Vrms^2 |v|``, at rated power
  and nominal line, the design's placement), which the reported loop gain includes
  (``design.tuning`` docstrings);
* voltage loop: the power command held over a block of ``Th/8``, the bus ``K/s`` with
  ``K = eta/(C Vo)``, averaged over the last 8 block means (a sliding half line cycle).

Both with the backward-Euler PI ``C(z) = kp + ki T z/(z - 1)``."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

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


def project_of(cfg_carrier):
    cfg, carrier = cfg_carrier
    prj = load_project(cfg)
    if prj.config.control.carrier != carrier:
        prj = from_config(prj.config.replace("control", carrier=carrier))
    return prj


def tuning_of(cfg_carrier):
    return project_of(cfg_carrier).tuning


def _sampled(g, tau: float, T: float):
    """The samples ``g(tau), g(T + tau), ...`` of ``g``'s impulse response from one period
    on: ``c e^{A tau} (zI - Phi)^-1 b`` (``z`` times it starts at the pulse's own period)."""
    sys = control.ss(g)
    a, b, c = np.asarray(sys.A), np.asarray(sys.B), np.asarray(sys.C)
    return control.ss(linalg.expm(a * T), b, c @ linalg.expm(a * tau), 0.0, T)


def circuit_tfs(prj):
    """(volts the duty takes off the bridge -> inductor current, -> X capacitor voltage) of a
    config's circuit, from its impedances: grid, DM inductor with its damping resistor across
    it, X capacitor, boost inductor (the grid a short)."""
    pl, r = prj.config.plant, prj.resolved
    s = control.tf("s")
    z_dm = (
        (pl.dm_resistance + pl.dm_inductance * s)
        * r.dm_damping_ohm
        / (pl.dm_resistance + pl.dm_inductance * s + r.dm_damping_ohm)
    )
    z_grid = pl.source_resistance + pl.source_inductance * s + z_dm
    z_x = 1 / (r.x_capacitance_F * s)
    z_in = control.minreal(z_grid * z_x / (z_grid + z_x), verbose=False)
    y = control.minreal(1 / (r.inductance_H * s + z_in), verbose=False)
    return y, control.minreal(-z_in * y, verbose=False)


def filtered_loop(prj, lp, carrier: str, a_rel: float = 0.0):
    """The current loop's gain with an input filter, built from impedances (module
    docstring): ``C P/(1 + F P_v (1/Vo - C g))``."""
    r, sp = prj.resolved, prj.config.spec
    T, vo = lp.ts_s, sp.vout
    y, v = circuit_tfs(prj)
    z = control.tf([1, 0], [1], T)
    if carrier == "centre":
        mean_line = 2 * np.sqrt(2) / np.pi * sp.vin_rms_nominal
        d = 1 - mean_line / vo
        taus = ((1 - d) * T / 2, (1 + d) * T / 2)
        p_i, p_v = (
            (vo * T / 2) * (z * _sampled(g, taus[0], T) + _sampled(g, taus[1], T)) / z
            for g in (y, v)
        )
    else:
        tau = T * (1 + 2 * a_rel) / 2
        own = a_rel / r.inductance_H  # the period's own ramp on the boost inductor alone
        p_i = vo * T * (own + _sampled(y, tau, T)) / z
        p_v = vo * T * _sampled(v, tau, T) / z
    k = 1 - np.exp(-2 * np.pi * r.ff_corner_Hz / sp.fsw)
    f = control.tf([k, 0], [1, -(1 - k)], T)
    g_ref = sp.power / sp.efficiency / sp.vin_rms_nominal**2  # rated, nominal line
    pi = control.tf([lp.kp + lp.ki * T, -lp.kp], [1, -1], T)
    return pi * p_i / (1 + f * p_v * (1 / vo - pi * g_ref))


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


def margins_by_python_control(loop: str, lp, carrier: str = "centre", prj=None):
    """(crossover Hz, phase margin deg, gain margin dB) of one loop, by python-control."""
    T = lp.ts_s
    pi = control.tf([lp.kp + lp.ki * T, -lp.kp], [1, -1], T)
    w = np.logspace(
        np.log10(2 * np.pi * lp.target_crossover_Hz) - 3, np.log10(np.pi / T * 0.999), 20000
    )
    if loop == "current" and prj is not None and prj.resolved.x_capacitance_F > 0:
        sys = filtered_loop(prj, lp, carrier)
    else:
        sys = pi * sampled_plant(loop, lp, carrier)
    resp = np.asarray(sys.frequency_response(w).complex)
    resp = resp.ravel()
    gm, pm, _, _, wgc, _ = control.stability_margins(control.frd(resp, w))
    return wgc / (2 * np.pi), pm, 20 * np.log10(gm)


@pytest.mark.parametrize("carrier", ["centre", "edge"])
def test_filtered_current_plant_answers_a_duty_pulse_as_the_circuit(carrier):
    """The design's sampled current plant with an input filter against the circuit simulated
    by scipy.signal.lsim (the appliance example's impedances, built here): one period's duty
    raised by ``dd`` moves the bridge's edges by ``dd T/2`` at each end (centre-aligned) or
    the low switch's edge by ``dd T`` (edge-aligned, at ``a' = 0``, the sample at half a whole
    period's on-time), pulses of ``Vo`` of that width; the current sampled where the carrier
    samples it, minus the unperturbed run, is the design's impulse response times ``dd`` (to
    2 % of its largest sample: the edges' finite width, which the design leaves out)."""
    from scipy import signal

    prj = project_of((EXAMPLES / "appliance_1k2.toml", carrier))
    sp, lp = prj.config.spec, prj.tuning.current
    T, vo, dd = lp.ts_s, sp.vout, 0.01
    y, _ = circuit_tfs(prj)
    num, den = np.ravel(y.num[0][0]), np.ravel(y.den[0][0])
    n_per, periods, at = 2000, 30, 3
    idx = np.arange(periods * n_per + 1)
    t = idx * (T / n_per)
    pos = np.where(idx // n_per == at, idx % n_per, -1)  # sample counts into the pulse's period
    w = round(dd * n_per)  # the pulse's width in samples (lsim's linear interpolation keeps
    # the area of a run of w ones at w samples)
    if carrier == "centre":
        d = 1 - 2 * np.sqrt(2) / np.pi * sp.vin_rms_nominal / vo
        e1 = round(d * n_per / 2)
        first = (pos >= e1) & (pos < e1 + w // 2)
        second = (pos >= n_per - e1 - w // 2) & (pos < n_per - e1)
        u = vo * (first | second)
    else:
        u = vo * (pos >= n_per - w)  # the edge at the period's end (a' = 0)
    k_s = np.arange(periods) * n_per + n_per // 2  # mid-period: half the on-time at a' = 0
    _, i_l, _ = signal.lsim((num, den), u.astype(float), t)
    got = i_l[k_s][at:] / dd
    _, (h,) = signal.dimpulse((lp.plant_num, lp.plant_den, T), n=periods - at + 1)
    expect = np.ravel(h)[1:]  # the duty computed at sample k acts in period k + 1
    got = got[: len(expect)]
    assert len(got) >= 20
    np.testing.assert_allclose(got, expect, atol=0.02 * np.max(np.abs(expect)))


@pytest.mark.parametrize("cfg", CONFIGS, ids=ids)
def test_current_loop_margins_hold_over_the_load_range(cfg):
    """The current loop is placed at rated power and nominal line; the current reference's
    path through the filter has its gain P/(eta Vrms^2) there. From no load (the path gone)
    to rated power at the lowest line (its largest gain) the phase margin stays above 45 deg
    and the gain margin above 6 dB (common practice for a current loop)."""
    from design.tuning import at_ref_gain, ref_gain_A_per_V

    prj = project_of(cfg)
    lp, sp = prj.tuning.current, prj.config.spec
    g_max = ref_gain_A_per_V(prj.config, sp.power, sp.vin_rms_min)
    for k in (0.0, 0.1, 0.25, 0.5, 0.75, 1.0):
        at = at_ref_gain(lp, k * g_max)
        assert at.phase_margin_deg > 45.0, (k, at.phase_margin_deg)
        assert at.gain_margin_dB > 6.0, (k, at.gain_margin_dB)


@pytest.mark.parametrize("cfg", CONFIGS, ids=ids)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_reported_margins_match_python_control(cfg, loop):
    prj = project_of(cfg)
    lp = getattr(prj.tuning, loop)
    fc, pm, gm = margins_by_python_control(loop, lp, cfg[1], prj)
    assert lp.crossover_Hz == pytest.approx(fc, rel=1e-4)
    assert lp.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert lp.gain_margin_dB == pytest.approx(gm, abs=0.05)


@pytest.mark.parametrize("cfg", CONFIGS, ids=ids)
@pytest.mark.parametrize("loop", ["current", "voltage"])
def test_tuned_loops_meet_their_targets(cfg, loop):
    """The PI placed on the sampled loop lands on the asked crossover and phase margin (to
    the grid's resolution), with a gain margin above 6 dB (common practice)."""
    prj = project_of(cfg)
    lp = getattr(prj.tuning, loop)
    fc, pm, gm = margins_by_python_control(loop, lp, cfg[1], prj)
    assert fc == pytest.approx(lp.target_crossover_Hz, rel=1e-3)
    assert pm == pytest.approx(lp.target_phase_margin_deg, abs=0.1)
    assert gm > 6.0


def test_closed_current_loop_step_by_difference_equation():
    """The loop as the firmware runs it, stepped in plain Python (PI by backward Euler on the
    mid-period sample, duty applied from the next period), settles on a reference step, and
    its overshoot is the one python-control's closed loop of the same tuning shows. The
    demo without its input filter: the boost inductor alone, whose difference equation this
    is."""
    demo = load_project(DEMO).config
    lp = from_config(demo.replace("plant", x_capacitance=0.0)).tuning.current
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
