"""Sizing against hand-worked textbook relations and scaling properties.

Sources: Erickson & Maksimovic, Fundamentals of Power Electronics, ch. 2 (boost in CCM:
di_pp = v (1 - v/Vo)/(L fsw), worst case at v = Vo/2 gives L = Vo/(4 fsw di_pp)); bus
energy balance for the twice-line ripple dv_pp = P/(2 pi f C Vo) and the hold-up
C = 2 P t_h/(Vo^2 - Vmin^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from design.config import load
from design.sizing import boost_ripple_pp, size

from .helpers import DEMO, EXAMPLES


@dataclass(frozen=True)
class S:
    vin_rms_min: float = 90.0
    vin_rms_max: float = 264.0
    vin_rms_nominal: float = 230.0
    line_freq: float = 50.0
    vout: float = 400.0
    power: float = 1500.0
    efficiency: float = 0.96
    fsw: float = 65e3
    ripple_current: float = 0.3
    ripple_voltage_pp: float = 0.05
    holdup_time: float = 0.01
    vout_min_holdup: float = 320.0


def test_universal_1k5_by_hand():
    z = size(load(DEMO).spec)
    # I_rms = 1500 / (0.96 * 90) = 17.3611 A; I_pk = 1.41421 * 17.3611 = 24.5523 A
    assert z.il_rms_A == pytest.approx(17.3611, rel=1e-5)
    assert z.iline_peak_A == pytest.approx(24.5523, rel=1e-5)
    # di_pp = 0.3 * 24.5523 = 7.36570 A; L = 400 / (4 * 65000 * 7.36570) = 208.868 uH
    assert z.ripple_pp_A == pytest.approx(7.36570, rel=1e-5)
    assert z.inductance_H == pytest.approx(208.868e-6, rel=1e-5)
    # C_ripple = 1500 / (2 pi 50 * 400 * 20) = 596.831 uF
    assert z.capacitance_ripple_F == pytest.approx(596.831e-6, rel=1e-5)
    # C_holdup = 2 * 1500 * 0.01 / (400^2 - 320^2) = 30 / 57600 = 520.833 uF
    assert z.capacitance_holdup_F == pytest.approx(520.833e-6, rel=1e-5)
    assert z.capacitance_F == pytest.approx(596.831e-6, rel=1e-5)
    # duty at the high-line peak: 1 - 373.352/400 = 0.066619
    assert z.duty_min == pytest.approx(0.066619, abs=1e-6)


def test_telecom_3k3_by_hand():
    z = size(load(EXAMPLES / "telecom_3k3.toml").spec)
    # I_rms = 3300/(0.975*176) = 19.2308 A; I_pk = 27.1964 A; di = 0.25 * I_pk = 6.79910 A
    assert z.il_rms_A == pytest.approx(19.2308, rel=1e-5)
    assert z.iline_peak_A == pytest.approx(27.1964, rel=1e-5)
    # L = 400/(4*65000*6.79910) = 226.274 uH
    assert z.inductance_H == pytest.approx(226.274e-6, rel=1e-5)
    # C_ripple = 3300/(2 pi 50 * 400 * 20) = 1313.03 uF;  C_holdup = 2*3300*0.02/(160000-90000) =
    # 1885.71 uF
    assert z.capacitance_ripple_F == pytest.approx(1313.03e-6, rel=1e-5)
    assert z.capacitance_holdup_F == pytest.approx(1885.71e-6, rel=1e-5)
    assert z.capacitance_F == z.capacitance_holdup_F
    # with hold-up dominating, the ripple falls below the target: 3300/(2 pi 50 * 1885.71e-6 *
    # 400) = 13.926 V
    assert z.bus_ripple_pp_V == pytest.approx(13.926, rel=1e-4)


def test_appliance_1k2_by_hand():
    z = size(load(EXAMPLES / "appliance_1k2.toml").spec)
    # I_rms = 1200/(0.96*85) = 14.7059 A; I_pk = 20.7973 A; di = 0.35 * I_pk = 7.27904 A
    assert z.il_rms_A == pytest.approx(14.7059, rel=1e-5)
    assert z.ripple_pp_A == pytest.approx(7.27904, rel=1e-5)
    # L = 390/(4*100000*7.27904) = 133.946 uH
    assert z.inductance_H == pytest.approx(133.946e-6, rel=1e-5)
    # C_ripple = 1200/(2 pi 60 * 390 * 23.4) = 348.792 uF; no hold-up asked
    assert z.capacitance_ripple_F == pytest.approx(348.792e-6, rel=1e-5)
    assert z.capacitance_holdup_F == 0.0
    # ripple at the low-line peak v = 120.208 V: 120.208 (1 - 120.208/390) / (133.946e-6 * 1e5) =
    # 6.2082 A
    assert z.ripple_at_vmin_peak_A == pytest.approx(6.2082, rel=1e-4)
    # peak inductor current = 20.7973 + 6.2082/2 = 23.9014 A
    assert z.il_peak_A == pytest.approx(23.9014, rel=1e-4)


def test_ripple_worst_at_half_vout():
    # the boost ripple v(1 - v/Vo) peaks at v = Vo/2 (d/dv = 1 - 2v/Vo = 0)
    L, f, vo = 200e-6, 65e3, 400.0
    vs = [i * 0.5 for i in range(0, 801)]
    best = max(vs, key=lambda v: boost_ripple_pp(v, vo, L, f))
    assert best == pytest.approx(vo / 2)
    assert boost_ripple_pp(vo / 2, vo, L, f) == pytest.approx(vo / (4 * L * f))


def test_capacitor_ripple_current_textbook_form():
    # with eta = 1: I_C,rms = Io sqrt(16 Vo / (3 pi Vm) - 1)  (ideal-rectifier result; from memory)
    s = S(efficiency=1.0)
    z = size(s)
    vm = math.sqrt(2) * s.vin_rms_min
    io = s.power / s.vout
    assert z.cap_ripple_rms_A == pytest.approx(
        io * math.sqrt(16 * s.vout / (3 * math.pi * vm) - 1), rel=1e-9
    )


pos = dict(allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(f1=st.floats(20e3, 200e3, **pos), k=st.floats(1.1, 5.0, **pos))
def test_inductance_scales_inverse_fsw(f1, k):
    a, b = size(S(fsw=f1)), size(S(fsw=f1 * k))
    assert a.inductance_H / b.inductance_H == pytest.approx(k, rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(r=st.floats(0.05, 1.0, **pos), k=st.floats(1.1, 1.9, **pos))
def test_inductance_scales_inverse_ripple(r, k):
    a, b = size(S(ripple_current=r)), size(S(ripple_current=r * k))
    assert a.inductance_H / b.inductance_H == pytest.approx(k, rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(p=st.floats(100.0, 5000.0, **pos), k=st.floats(1.1, 4.0, **pos))
def test_capacitance_scales_with_power(p, k):
    a, b = size(S(power=p)), size(S(power=p * k))
    assert b.capacitance_ripple_F / a.capacitance_ripple_F == pytest.approx(k, rel=1e-9)
    assert b.capacitance_holdup_F / a.capacitance_holdup_F == pytest.approx(k, rel=1e-9)
    assert b.capacitance_F / a.capacitance_F == pytest.approx(k, rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(v1=st.floats(200.0, 390.0, **pos), dv=st.floats(0.5, 9.0, **pos))
def test_holdup_grows_as_floor_approaches_vout(v1, dv):
    a, b = size(S(vout_min_holdup=v1)), size(S(vout_min_holdup=min(v1 + dv, 399.9)))
    assert b.capacitance_holdup_F > a.capacitance_holdup_F
