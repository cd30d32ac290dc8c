"""The slow leg's midpoint with its node capacitance: the charge the line current must move
before the other slow device can take it, and the zero-crossing current spike it makes.

Sources:
- scipy.integrate.solve_ivp (DOP853) on the three-state circuit (inductor current, bus
  capacitor, slow midpoint) over two line cycles whose crossings start the fast leg at full
  duty with the midpoint on the other rail;
- the charge and energy balance of a series L-C swing (any circuits text; Erickson &
  Maksimovic, ch. 19, treat the same resonant transition of a switch node): a node of
  capacitance C_n moved by V through an inductor L from a driving voltage e0 leaves the
  inductor carrying sqrt((e0^2 - (e0 - V)^2) C_n / L), and it has passed the charge C_n V;
- a diode's stored charge Q_rr swept by a current ramping at e0/L ends at sqrt(2 e0 Q_rr / L)
  (the charge of a linear ramp).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from plant import layout as LY
from plant.batch import FIELDS, Plant
from plant.grid import Grid
from plant.load import Load

from .helpers import GHI, GLO
from .test_plant_reference import K_ESR, VBUS0, VRMS, F, G, _vs, fast_intervals, make_sequence
from .test_plant_reference import P as P0

CN = 2e-9  # a superjunction pair's node (F), illustrative
P = replace(P0, slow_node_capacitance_F=CN, slow_diode=True)
IMAX, IMIN = FIELDS.index("i_max_A"), FIELDS.index("i_min_A")


# -- reference: three states, events at the rails and at zero current --------------------
def _vb(m, i, vc):
    return K_ESR * (vc + P.capacitor_esr_ohm * m * i)


def _mode(x, t, qa):
    """(direction, swinging): +1/-1 the current's way (0: at rest), and whether the slow
    midpoint is not yet on the rail that way needs."""
    i, vc, u = x
    vb = _vb(0, 0, vc)
    qa_pos = 1 if qa is None else qa
    qa_neg = 0 if qa is None else qa
    if i > 0 or (i == 0 and _vs(t) - (qa_pos * vb - u) > 0):
        return 1, u > 0.0
    if i < 0 or (i == 0 and _vs(t) - (qa_neg * vb - u) < 0):
        return -1, u < vb
    return 0, False


def _rhs(qa, d, swinging):
    Lt, R, C = P.l_total_H, P.r_total_ohm, P.capacitance_F

    def f(t, x):
        i, vc, u = x
        if d == 0:
            return [0.0, -G * _vb(0, 0, vc) / C, 0.0]
        q = (1 if d > 0 else 0) if qa is None else qa
        if swinging:  # the midpoint's capacitance, half to each rail
            m = q - 0.5
            vb = _vb(m, i, vc)
            return [(_vs(t) - R * i - (q * vb - u)) / Lt, (m * i - G * vb) / C, -i / CN]
        m = q - (0 if d > 0 else 1)
        vb = _vb(m, i, vc)
        dvc = (m * i - G * vb) / C
        return [(_vs(t) - R * i - m * vb) / Lt, dvc, 0.0 if d > 0 else K_ESR * dvc]

    return f


def _at_plus(t, y):
    return y[2] - _vb(0, 0, y[1])


def _at_minus(t, y):
    return y[2]


def _interval(x, ta, tb, qa):
    while ta < tb - 1e-15:
        d, swinging = _mode(x, ta, qa)
        events = []
        if d != 0:
            ev0 = lambda t, y: y[0]  # noqa: E731
            ev0.terminal, ev0.direction = True, -d
            events.append(ev0)
        if swinging:
            # the midpoint at the rail it moves toward (plus for a negative current)
            ev1 = _at_plus if d < 0 else _at_minus
            ev1.terminal, ev1.direction = True, -d
            events.append(ev1)
        sol = solve_ivp(
            _rhs(qa, d, swinging),
            (ta, tb),
            x,
            method="DOP853",
            rtol=1e-10,
            atol=1e-12,
            events=events or None,
            max_step=2e-7 if swinging else np.inf,
        )
        x = sol.y[:, -1].copy()
        ta = sol.t[-1]
        if sol.status == 1:
            if len(sol.t_events[0]) and sol.t_events[0][-1] == ta and d != 0:
                x[0] = 0.0
            if swinging and len(sol.t_events[-1]) and sol.t_events[-1][-1] == ta:
                x[2] = 0.0 if d > 0 else _vb(0, 0, x[1])
        else:
            ta = tb
    return x


def reference(seq):
    T = P.period_s
    x = np.array([0.0, VBUS0, 0.0])
    out = [x.copy()]
    t0 = 0.0
    for comp, gates in seq:
        for a, b, qa in fast_intervals(comp, gates, P):
            x = _interval(x, t0 + a, t0 + b, qa)
        out.append(x.copy())
        t0 += T
    return np.array(out)


@pytest.fixture(scope="module")
def crossing():
    periods = int(2 / F / P.period_s)  # two line cycles
    seq, ours = make_sequence(periods, P)
    return seq, ours, reference(seq)


def test_slow_midpoint_against_solve_ivp(crossing):
    seq, ours, ref = crossing
    ipk = np.max(np.abs(ref[:, 0]))
    assert ipk > 4.0
    # the midpoint really swung: it sat on each rail in turn
    assert np.any(ref[:, 2] == 0.0) and np.any(ref[:, 2] > 300.0)
    # within 0.5 % of the peak current and of the bus at every period boundary (the bound of
    # the two-state reference test)
    assert np.max(np.abs(ours[:, 0] - ref[:, 0])) < 0.005 * ipk
    assert np.max(np.abs(ours[:, 1] - ref[:, 1]) / ref[:, 1]) < 0.005


# -- one period from rest, by hand -----------------------------------------------------------
def _one_period(compare, gates, i0=0.0, sn=1.0, p=P, theta_deg=0.5):
    """One period of a lane on the line just past its positive-going zero crossing, the slow
    midpoint at ``sn`` of the bus (1: still on the plus rail from the negative half)."""
    st = Plant(
        p,
        Grid(1, VRMS, F, theta_deg),
        Load(1, "resistive", 0.0, 400.0, connect_V=1e9, uvlo_V=0.0),
        None,
        i0,
        VBUS0,
    )
    st.lane[0, LY.L_SN] = sn
    out = np.zeros((1, len(FIELDS)))
    st.step(0, np.array([compare], dtype=np.uint16), np.array([gates], dtype=np.uint8), out)
    return out[0], st


def _swing_peak(e0, v, cn=CN, L=P.l_total_H):
    return math.sqrt((e0 * e0 - (e0 - v) ** 2) * cn / L)


def test_spike_at_full_duty_against_the_charge_balance():
    """The fast leg's main switch on for the whole period right at the crossing, the slow
    midpoint still on the plus rail: the line current swings it down, and leaves carrying the
    swing's current, which the small line voltage then barely moves."""
    c = P.period_counts
    rec, st = _one_period(c, GLO)
    e0 = VBUS0 + _vs(0.5 / 360 / F)  # fast midpoint at minus, slow at plus
    spike = _swing_peak(e0, VBUS0)
    # the rest of the period at the line voltage: at most its integral over the period / L
    w, th = 2.0 * math.pi * F, math.radians(0.5)
    extra = math.sqrt(2) * VRMS / (w * P.l_total_H) * (math.cos(th) - math.cos(th + w * P.period_s))
    assert spike > 0.5
    assert spike * 0.995 < rec[IMAX] < (_swing_peak(e0 + 10.0, VBUS0) + extra) * 1.005
    assert st.lane[0, LY.L_SN] == 0.0  # the midpoint reached the minus rail
    # the charge the swing moved: the node's, C_n V (plus the line's small push after it)
    q = rec[FIELDS.index("i_avg_A")] * P.period_s
    assert q > CN * VBUS0


def test_ramp_first_step_and_rest_reduce_the_spike():
    """The controller's duty ramp starts with a short on-time: the swing (a quarter period of
    sqrt(L C_n), 1.4 us here) is cut short and the current stays below the full-duty spike."""
    c = P.period_counts
    full, _ = _one_period(c, GLO)
    quarter = 0.5 * math.pi * math.sqrt(P.l_total_H * CN)
    dl = 0.8 * quarter / (0.5 * P.period_s)  # on for 0.8 of the quarter swing at the start
    ramp, st = _one_period(round(dl * c), GLO)
    peak_ramp = ramp[IMAX]
    bound = (VBUS0 + 10.0) * math.sqrt(CN / P.l_total_H) * math.sin(0.5 * math.pi * 0.8)
    assert peak_ramp < bound
    assert peak_ramp < 0.97 * full[IMAX]
    assert 0.0 < st.lane[0, LY.L_SN] < 1.0 or st.lane[0, LY.L_SN] == 0.0


def test_reverse_recovery_adds_the_stored_charge():
    """A slow diode still conducting when the fast leg drives the current back (no blanking):
    its stored charge is swept first, and the swing then starts from that current; from rest
    (blanking let the current die out) only the node's charge counts."""
    qrr = 100e-9
    p = replace(P, slow_qrr_C=qrr)
    # the positive half's current still flowing through the low slow diode (midpoint at
    # minus) just after the line turned negative-going... the fast high switch on for the
    # whole period drives it negative; the line just past zero and rising, so that after the
    # swing it pushes the current back (the swing's end is the period's peak)
    i0, th = 0.3, 0.1
    rec, st = _one_period(0, GHI, i0=i0, sn=0.0, p=p, theta_deg=th)
    e0 = VBUS0 - _vs(th / 360 / F)  # drives the current negative
    i_rr = math.sqrt(2.0 * e0 * qrr / p.l_total_H)
    z = math.sqrt(p.l_total_H / CN)
    rho2 = e0 * e0 + (z * i_rr) ** 2
    spike = math.sqrt(rho2 - (e0 - VBUS0) ** 2) / z
    assert -rec[IMIN] == pytest.approx(spike, rel=0.01)
    assert st.lane[0, LY.L_SN] == 1.0
    rest, _ = _one_period(0, GHI, i0=0.0, sn=0.0, p=p, theta_deg=th)
    assert -rest[IMIN] == pytest.approx(_swing_peak(e0, VBUS0), rel=0.01)
    assert -rest[IMIN] < -rec[IMIN]
