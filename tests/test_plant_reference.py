"""The switching plant against scipy.integrate.solve_ivp on the same circuit and gate sequence.

The gate sequence comes from a run of the plant under a simple proportional current
controller (in Python); it is then replayed into an independent reference: each
PWM sub-interval integrated by solve_ivp (DOP853, rtol 1e-10) with the exact
sinusoidal source, an event at zero current for diode conduction, and the
zero-current state held until a path is forward-biased again.  It spans two line
cycles and includes a stretch of discontinuous conduction: near each zero
crossing the synchronous switch stays off, so its body diode blocks reversal.  Both carriers
(``design.contract.TIMINGS``): the reference lays each one's sub-intervals out by itself.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from plant.batch import FIELDS, Plant
from plant.grid import Grid
from plant.load import Load
from plant.stage import StageParams

from .helpers import (
    GHI as GATE_FAST_HI,
)
from .helpers import (
    GLO as GATE_FAST_LO,
)
from .helpers import (
    SHI as GATE_SLOW_HI,
)
from .helpers import (
    SLO as GATE_SLOW_LO,
)

P = StageParams(
    inductance_H=400e-6,
    capacitance_F=470e-6,
    inductor_dcr_ohm=0.05,
    capacitor_esr_ohm=0.04,
    rds_on_fast_ohm=0.05,
    rds_on_slow_ohm=0.03,
    dead_time_s=200e-9,
    fsw_Hz=20e3,
    period_counts=1000,
    source_resistance_ohm=0.1,
    source_inductance_H=30e-6,
)
VRMS, F, VBUS0, G = 230.0, 50.0, 390.0, 1.0 / 200.0


def make_sequence(periods, p=P):
    """Closed loop under a P controller on our plant: returns per-period compare, gates, and
    states."""
    # a resistive load of conductance G, connected from the start (power-good and UVLO at 0 V)
    st = Plant(
        p,
        Grid(1, VRMS, F, 0.0),
        Load(1, "resistive", G * 400.0**2, 400.0, connect_V=0.0, uvlo_V=0.0),
        None,
        0.0,
        VBUS0,
    )
    seq, states = [], [(st.i[0], st.vc[0])]
    comp, gates = 0.0, 0
    ipk = 6.0
    out = np.zeros((1, len(FIELDS)))
    cmd = np.zeros(
        1, dtype=[("compare", "<u2"), ("gates", "u1"), ("mode", "u1"), ("faults", "<u2")]
    )
    for k in range(periods):
        cmd["compare"], cmd["gates"] = comp, gates
        st.step(k, cmd["compare"], cmd["gates"], out)
        vs = out[0, FIELDS.index("vs_V")]  # source at the period's midpoint
        seq.append((comp, gates))
        states.append((st.i[0], st.vc[0]))
        # next period's command
        pol = 1 if vs > 0 else -1
        vb = st.vc[0] / (
            1.0 + P.capacitor_esr_ohm * G
        )  # bus terminal voltage with no converter current
        iref = ipk * abs(vs) / (math.sqrt(2) * VRMS)
        d = min(max(1 - abs(vs) / vb + 0.02 * (iref - pol * st.i[0]), 0.0), 0.97)
        if abs(vs) < 5.0:
            gates, comp = 0, 0.0
            continue
        sync = abs(vs) > 60.0  # no synchronous switch near the crossing: diode mode, DCM
        if pol > 0:
            comp = round(d * P.period_counts)
            gates = GATE_FAST_LO | GATE_SLOW_LO | (GATE_FAST_HI if sync else 0)
        else:
            comp = P.period_counts - round(d * P.period_counts)
            gates = GATE_FAST_HI | GATE_SLOW_HI | (GATE_FAST_LO if sync else 0)
    return seq, np.array(states)


K_ESR = 1.0 / (1.0 + P.capacitor_esr_ohm * G)


def _vs(t):
    return math.sqrt(2) * VRMS * math.sin(2 * math.pi * F * t)


def _vbus(m, i, vc):
    return K_ESR * (vc + P.capacitor_esr_ohm * m * i)


def _rhs(m, zero):
    Lt, R, C = P.l_total_H, P.r_total_ohm, P.capacitance_F

    def f(t, x):
        i, vc = x
        if zero:
            return [0.0, -G * _vbus(0, 0, vc) / C]
        vb = _vbus(m, i, vc)
        return [(_vs(t) - R * i - m * vb) / Lt, (m * i - G * vb) / C]

    return f


def _m_of(qa, qb, sign):
    """Midpoint difference with a switch fixing a midpoint (0/1) or its diode (None) choosing
    by the current's sign."""
    qa_ = qa if qa is not None else (1 if sign > 0 else 0)
    qb_ = qb if qb is not None else (0 if sign > 0 else 1)
    return qa_ - qb_


def _conduction(qa, qb, forced, x, ta):
    """(m, zero): which path the present state and source voltage forward-bias."""
    i, vc = x
    if forced or i > 0 or (i == 0 and _vs(ta) - _m_of(qa, qb, 1) * _vbus(0, 0, vc) > 0):
        return _m_of(qa, qb, 1), False
    if i < 0 or (i == 0 and _vs(ta) - _m_of(qa, qb, -1) * _vbus(0, 0, vc) < 0):
        return _m_of(qa, qb, -1), False
    return 0, True


def _interval(x, ta, tb, qa, qb):
    """Integrate one sub-interval by solve_ivp, stopping where a diode current reaches zero."""
    forced = _m_of(qa, qb, 1) == _m_of(qa, qb, -1)
    while ta < tb - 1e-15:
        m, zero = _conduction(qa, qb, forced, x, ta)
        ev = None
        if not forced and not zero:
            ev = lambda t, y: y[0]  # noqa: E731
            ev.terminal = True
            ev.direction = -1 if x[0] > 0 else 1
        sol = solve_ivp(
            _rhs(m, zero), (ta, tb), x, method="DOP853", rtol=1e-10, atol=1e-12, events=ev
        )
        x = sol.y[:, -1].copy()
        if sol.status == 1:  # current reached zero
            x[0] = 0.0
            ta = sol.t[-1]
        else:
            ta = tb
    return x


def fast_intervals(comp, gates, p=P, edge=False):
    """One period's sub-intervals laid out by the carrier, by our own reading of it:
    (start, end, the fast midpoint's rail: 0 low switch on, 1 high switch on, None neither),
    the empty ones left out."""
    T = p.period_s
    dl = min(max(comp / p.period_counts, 0.0), 1.0)
    td = p.dead_time_s if 0.0 < dl < 1.0 else 0.0
    if edge:  # the low switch from the period start (after the dead time) for dl T
        ton = dl * T
        bounds = [
            (0.0, min(td, ton), "dead"),
            (min(td, ton), ton, "lo"),
            (ton, min(ton + td, T), "dead"),
            (min(ton + td, T), T, "hi"),
        ]
    else:  # the low switch dl T/2 at each end
        t1, t2 = dl * T / 2, T - dl * T / 2
        bounds = [
            (0.0, t1, "lo"),
            (t1, min(t1 + td, t2), "dead"),
            (min(t1 + td, t2), t2, "hi"),
            (t2, min(t2 + td, T), "dead"),
            (min(t2 + td, T), T, "lo"),
        ]
    out = []
    for a, b, kind in bounds:
        if b <= a:
            continue
        lo_on = kind == "lo" and gates & GATE_FAST_LO
        qa = 0 if lo_on else (1 if (kind == "hi" and gates & GATE_FAST_HI) else None)
        out.append((a, b, qa))
    return out


def reference(seq, edge=False):
    T = P.period_s
    x = np.array([0.0, VBUS0])
    out = [x.copy()]
    t0 = 0.0
    for comp, gates in seq:
        qb = 0 if gates & GATE_SLOW_LO else (1 if gates & GATE_SLOW_HI else None)
        for a, b, qa in fast_intervals(comp, gates, edge=edge):
            x = _interval(x, t0 + a, t0 + b, qa, qb)
        out.append(x.copy())
        t0 += T
    return np.array(out)


@pytest.fixture(scope="module", params=["centre", "edge"])
def both(request):
    periods = int(2 / F / P.period_s)  # two line cycles
    edge = request.param == "edge"
    seq, ours = make_sequence(periods, replace(P, edge_carrier=edge))
    return seq, ours, reference(seq, edge)


def test_gate_sequence_has_dcm_stretch(both):
    seq, ours, _ = both
    # the sequence really leaves the current at zero for whole periods near the crossings
    zero_periods = np.sum(ours[1:, 0] == 0.0)
    assert zero_periods > 5
    assert any(g & GATE_SLOW_HI for _, g in seq) and any(g & GATE_SLOW_LO for _, g in seq)


def test_current_and_bus_match_solve_ivp(both):
    _, ours, ref = both
    ipk = np.max(np.abs(ref[:, 0]))
    assert ipk > 4.0
    # within 0.5 % of the peak current, and 0.5 % of the bus voltage, at every period boundary
    assert np.max(np.abs(ours[:, 0] - ref[:, 0])) < 0.005 * ipk
    assert np.max(np.abs(ours[:, 1] - ref[:, 1]) / ref[:, 1]) < 0.005
