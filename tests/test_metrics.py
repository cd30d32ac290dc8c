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
    assert q["thd_i"] == pytest.approx(0.4834, abs=0.0005)
    assert q["pf"] == pytest.approx(0.9003, abs=0.0005)
    # fundamental of a square of amplitude A: (4/pi) A / sqrt(2) rms
    assert q["harmonics_A"][0] == pytest.approx(4 / math.pi * 10 / math.sqrt(2), rel=1e-3)


def test_pure_sine():
    t, v = grid_and(50.0)
    q = metrics.power_quality(v, 5.0 * np.sin(2 * np.pi * 50 * t), FS, 50.0)
    assert q["thd_i"] < 1e-6 and q["pf"] == pytest.approx(1.0, abs=1e-9)
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
    assert metrics.power_quality(v, ok, FS, f)["class_a_pass"]
    q = metrics.power_quality(v, bad, FS, f)
    assert not q["class_a_pass"] and q["class_a_worst_h"] == 3


def test_window_lengths_iec_61000_4_7():
    # 10 cycles at 50 Hz and 12 at 60 Hz: both about 200 ms
    assert metrics.window_cycles(50.0) == 10 and metrics.window_cycles(60.0) == 12
    t = np.arange(int(0.5 * FS)) / FS
    w = metrics.window_slice(t, 60.0)
    assert (w.stop - w.start) / FS == pytest.approx(0.2, abs=1 / FS)


def test_step_response_figures():
    t = np.arange(0, 1, 1e-3)
    v = 400 - 40 * np.exp(-(t - 0.2) / 0.05) * (t >= 0.2)
    r = metrics.step_response(t, v, 0.2, 400.0)
    assert r["undershoot_V"] == pytest.approx(40.0, rel=1e-6)
    # into the 2 % band (8 V): 40 exp(-x/0.05) = 8 -> x = 0.05 ln 5 = 0.0805 s
    assert r["settling_s"] == pytest.approx(0.05 * math.log(5), abs=2e-3)


def test_half_cycle_mean_removes_twice_line_ripple():
    # a 100 Hz ripple averaged over exactly one 100 Hz period (a 50 Hz half cycle) vanishes
    t = np.arange(int(0.1 * FS)) / FS
    v = 400 + 10 * np.sin(2 * np.pi * 100 * t)
    m = metrics.half_cycle_mean(v, FS, 50.0)
    assert np.max(np.abs(m[1000:] - 400)) < 0.01
