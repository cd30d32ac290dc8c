"""Figures of merit against analytic facts and the IEC 61000-3-2 Class A table."""

from __future__ import annotations

import math

import numpy as np
import pytest

from harness.closedloop import metrics

FS = 65000.0


def grid_and(f, cycles=10):
    n = int(round(cycles * FS / f))
    t = np.arange(n) / FS
    return t, np.sqrt(2) * 230.0 * np.sin(2 * np.pi * f * t)


@pytest.mark.parametrize("f", [50.0, 60.0])
def test_square_wave_thd_and_pf(f):
    # analytic: a square wave has THD sqrt(pi^2/8 - 1) = 48.34 % and, against a sine, PF 2
    # sqrt(2)/pi = 0.9003
    t, v = grid_and(f, metrics.window_cycles(f))
    i = 10.0 * np.sign(np.sin(2 * np.pi * f * (t + 0.5 / FS)))
    q = metrics.power_quality(v, i, FS, f)
    assert q["thd_total"] == pytest.approx(0.4834, abs=0.0005)
    assert q["pf"] == pytest.approx(0.9003, abs=0.0005)
    # h <= 40 only: the square wave's odd harmonics 1/h of the fundamental, summed here
    assert q["thd_i"] == pytest.approx(math.sqrt(sum(1 / h**2 for h in range(3, 40, 2))), abs=0.001)
    # fundamental of a square of amplitude A: (4/pi) A / sqrt(2) rms
    assert q["harmonics_A"][0] == pytest.approx(4 / math.pi * 10 / math.sqrt(2), rel=1e-3)


def test_pure_sine():
    t, v = grid_and(50.0)
    q = metrics.power_quality(v, 5.0 * np.sin(2 * np.pi * 50 * t), FS, 50.0)
    assert q["thd_i"] < 1e-6 and q["thd_total"] < 1e-6 and q["pf"] == pytest.approx(1.0, abs=1e-9)
    assert abs(q["dc_A"]) < 1e-9
    assert q["displacement_factor"] == pytest.approx(1.0, abs=1e-9)


def test_displacement_of_shifted_sine():
    t, v = grid_and(50.0)
    q = metrics.power_quality(v, 5.0 * np.sin(2 * np.pi * 50 * t - math.radians(30)), FS, 50.0)
    assert q["displacement_factor"] == pytest.approx(math.cos(math.radians(30)), abs=1e-6)
    assert q["pf"] == pytest.approx(math.cos(math.radians(30)), abs=1e-6)


def test_known_harmonics_recovered():
    f = 50.0
    t, v = grid_and(f)
    amps = {1: 8.0, 3: 1.2, 5: 0.7, 7: 0.31, 11: 0.12, 2: 0.05, 39: 0.02}
    i = sum(math.sqrt(2) * a * np.sin(2 * np.pi * h * f * t + 0.3 * h) for h, a in amps.items())
    q = metrics.power_quality(v, i, FS, f)
    for h, a in amps.items():
        assert q["harmonics_A"][h - 1] == pytest.approx(a, rel=0.001)
    for h in range(1, 41):
        if h not in amps:
            assert q["harmonics_A"][h - 1] < 1e-9


# IEC 61000-3-2 Class A maximum permissible harmonic current, A rms (quoted from memory of the
# standard)
CLASS_A = {3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21, 2: 1.08, 4: 0.43, 6: 0.30}


def test_class_a_table_value_by_value():
    for h, lim in CLASS_A.items():
        assert metrics.class_a_limit_A(h) == lim
    for h in range(15, 40, 2):
        assert metrics.class_a_limit_A(h) == pytest.approx(0.15 * 15 / h)
    for h in range(8, 41, 2):
        assert metrics.class_a_limit_A(h) == pytest.approx(0.23 * 8 / h)
    # spot values written out: h15 0.15 A, h39 0.0577 A, h8 0.23 A, h40 0.046 A
    assert metrics.class_a_limit_A(15) == pytest.approx(0.15)
    assert metrics.class_a_limit_A(39) == pytest.approx(0.05769, rel=1e-3)
    assert metrics.class_a_limit_A(40) == pytest.approx(0.046)


def test_class_a_pass_and_fail():
    f = 50.0
    t, v = grid_and(f)
    base = math.sqrt(2) * 6.0 * np.sin(2 * np.pi * f * t)
    ok = base + math.sqrt(2) * 2.2 * np.sin(2 * np.pi * 3 * f * t)
    bad = base + math.sqrt(2) * 2.4 * np.sin(2 * np.pi * 3 * f * t)
    q_ok, q_bad = (metrics.power_quality(v, x, FS, f) for x in (ok, bad))
    a_ok = metrics.class_a(q_ok["harmonics_A"], q_ok["v_rms_V"], q_ok["i_rms_A"])
    a_bad = metrics.class_a(q_bad["harmonics_A"], q_bad["v_rms_V"], q_bad["i_rms_A"])
    assert a_ok["class_a_applicable"] and a_ok["class_a_pass"]
    # margin to the h3 limit 2.30 A: 100 (1 - 2.2/2.3) = 4.35 %
    assert a_ok["class_a_margins_pct"]["3"] == pytest.approx(100 * (1 - 2.2 / 2.3), abs=0.01)
    assert not a_bad["class_a_pass"] and a_bad["class_a_worst_h"] == 3
    assert a_bad["class_a_margins_pct"]["3"] == pytest.approx(100 * (1 - 2.4 / 2.3), abs=0.01)


@pytest.mark.parametrize(
    "v_rms,i_rms,why",
    [
        (120.0, 5.0, "outside 220..240 V"),
        (90.0, 17.2, "outside 220..240 V"),
        (230.0, 29.0, "exceeds 16 A"),
        (264.0, 4.0, "outside 220..240 V"),
    ],
)
def test_class_a_out_of_scope(v_rms, i_rms, why):
    """IEC 61000-3-2 covers equipment up to 16 A per phase; its Class A limits are given for
    230 V (220..240 V) mains: outside that no verdict, only the reason."""
    a = metrics.class_a([1.0] * 40, v_rms, i_rms)
    assert not a["class_a_applicable"] and a["class_a_pass"] is None and why in a["class_a_reason"]


def test_groups_take_the_neighbouring_interharmonics():
    """IEC 61000-4-7 grouping: an interharmonic 5 Hz above h3 (one bin at 50 Hz, 10 cycles)
    belongs to the h3 group; one 25 Hz above it (the group edge) counts half to each side."""
    f = 50.0
    t, _ = grid_and(f)
    i = math.sqrt(2) * (
        np.sin(2 * np.pi * f * t)
        + 0.3 * np.sin(2 * np.pi * 155.0 * t)
        + 0.2 * np.sin(2 * np.pi * 175.0 * t)
    )
    g = metrics.harmonic_groups(i, 10)
    assert g[0] == pytest.approx(1.0, rel=1e-9)
    assert g[2] == pytest.approx(math.sqrt(0.3**2 + 0.2**2 / 2), rel=1e-9)
    assert g[3] == pytest.approx(math.sqrt(0.2**2 / 2), rel=1e-9)


def test_dc_is_reported_not_counted_as_distortion():
    t, v = grid_and(50.0)
    q = metrics.power_quality(v, 5.0 * np.sin(2 * np.pi * 50 * t) + 0.4, FS, 50.0)
    assert q["dc_A"] == pytest.approx(0.4, abs=1e-9)
    assert q["thd_total"] < 1e-9 and q["thd_i"] < 1e-9


def test_ideal_sine_has_no_zero_crossing_distortion():
    t, v = grid_and(50.0)
    i = 12.0 * np.sin(2 * np.pi * 50 * t - 0.05)  # any phase: the fundamental is the reference
    dev, frac = metrics.zero_crossing_distortion(v, i, FS, 50.0, 24.5)
    assert dev < 1e-9 and frac < 1e-9


def test_zero_crossing_distortion_of_a_blanked_sine():
    """A sine held at zero while |v| < 10 % of the peak: the largest deviation is about the
    fundamental at the blanking edge, 10 % of its peak; checked against the fundamental fitted
    here by numpy's least squares."""
    t, v = grid_and(50.0)
    i = 20.0 * np.sin(2 * np.pi * 50 * t)
    i[np.abs(v) < 0.1 * np.abs(v).max()] = 0.0
    basis = np.column_stack([np.sin(2 * np.pi * 50 * t), np.cos(2 * np.pi * 50 * t)])
    fund = basis @ np.linalg.lstsq(basis, i, rcond=None)[0]
    near = np.abs(v) < 0.25 * np.abs(v).max()
    dev, frac = metrics.zero_crossing_distortion(v, i, FS, 50.0, 40.0)
    assert dev == pytest.approx(np.max(np.abs(i - fund)[near]), rel=1e-6)
    assert 1.9 < dev < 2.1 and frac == pytest.approx(dev / 40.0)


def test_window_lengths_iec_61000_4_7():
    # 10 cycles at 50 Hz and 12 at 60 Hz: both about 200 ms
    assert metrics.window_cycles(50.0) == 10 and metrics.window_cycles(60.0) == 12


def test_step_response_figures():
    t = np.arange(0, 1, 1e-3)
    v = 400 - 40 * np.exp(-(t - 0.2) / 0.05) * (t >= 0.2)
    r = metrics.step_response(t, v, 0.2, 400.0)
    assert r["undershoot_V"] == pytest.approx(40.0, rel=1e-6)
    # into the 2 % band (8 V): 40 exp(-x/0.05) = 8 -> x = 0.05 ln 5 = 0.0805 s
    assert r["settling_s"] == pytest.approx(0.05 * math.log(5), abs=2e-3) and r["settled"]
    # a window that ends before the bus is back: not settled
    r = metrics.step_response(t, v, 0.2, 400.0, t_end=0.25)
    assert not r["settled"] and r["settling_s"] == math.inf


def test_half_cycle_mean_removes_twice_line_ripple():
    # a 100 Hz ripple averaged over exactly one 100 Hz period (a 50 Hz half cycle) vanishes
    t = np.arange(int(0.1 * FS)) / FS
    v = 400 + 10 * np.sin(2 * np.pi * 100 * t)
    m = metrics.half_cycle_mean(v, FS, 50.0)
    assert np.max(np.abs(m[1000:] - 400)) < 0.01
