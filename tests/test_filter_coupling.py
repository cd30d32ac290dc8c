"""The input filter coupled to the switching stage, against scipy.integrate.solve_ivp on the
whole circuit.

The plant solves the filter once a period with the stage's period-average current, and the
stage inside the period with the X capacitor's voltage moving linearly to where the filter
is predicted to be at the period's end. The reference integrates the five states together
(grid current, DM inductor current, X capacitor voltage, boost inductor current, bus
capacitor voltage) sub-interval by sub-interval (DOP853, rtol 1e-10). The stage is a
low-inductance one whose boost inductor and X capacitor resonate near a quarter of the
switching frequency, where a coupling a period late shows most; a two-period dip of the duty
excites the resonance, open loop (no controller), the current positive throughout (no diode events).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp

from plant import layout as LY
from plant.batch import FIELDS, Plant
from plant.grid import Grid
from plant.load import Load
from plant.stage import StageParams

from .helpers import GHI, GLO, SLO
from .test_plant_reference import fast_intervals

V_DC, VBUS0, I0 = 150.0, 400.0, 60.0  # V, V, A: a DC line near the peak of a low line
K_STEP, PERIODS = 20, 60  # a two-period dip of the duty at K_STEP, the periods compared
PF = StageParams(
    inductance_H=30e-6,
    capacitance_F=1.5e-3,
    inductor_dcr_ohm=0.005,
    capacitor_esr_ohm=0.01,
    rds_on_fast_ohm=0.01,
    rds_on_slow_ohm=0.005,
    dead_time_s=100e-9,
    fsw_Hz=100e3,
    period_counts=1000,
    source_resistance_ohm=0.05,
    source_inductance_H=20e-6,
    x_capacitance_F=3e-6,
    dm_inductance_H=10e-6,
    dm_resistance_ohm=0.01,
    dm_damping_ohm=math.sqrt(10e-6 / 3e-6),
)
G = V_DC * I0 / VBUS0**2  # S: the load that takes the line's power at the bus
GATES = GLO | GHI | SLO  # positive half, synchronous switch on: both fast switches conduct


def resonance_Hz() -> float:
    lg = PF.source_inductance_H + PF.dm_inductance_H
    lpar = lg * PF.inductance_H / (lg + PF.inductance_H)
    return 1.0 / (2.0 * math.pi * math.sqrt(lpar * PF.x_capacitance_F))


def duty(k: int) -> float:
    """The duty that holds the current (the X capacitor's voltage less the path's drop over
    the bus), 3 % lower for two periods at K_STEP."""
    vx0 = V_DC - (PF.source_resistance_ohm + PF.dm_resistance_ohm) * I0
    d_eq = 1.0 - (vx0 - PF.r_total_ohm * I0) / VBUS0
    return d_eq - (0.03 if K_STEP <= k < K_STEP + 2 else 0.0)


def plant_run() -> np.ndarray:
    """(periods, 2): each period's mean X capacitor voltage (the sensed line, the mean of its
    ends) and the boost inductor's current at its start, by the plant."""
    st = Plant(
        PF,
        Grid(1, 0.0, 50.0, 0.0, dc_V=[V_DC]),
        Load(1, "resistive", G * 400.0**2, 400.0, connect_V=0.0, uvlo_V=0.0),
        None,
        I0,
        VBUS0,
    )
    # the filter carrying the stage's current, its capacitor at the line less the drops
    st.lane[0, LY.L_FIS] = st.lane[0, LY.L_FIM] = st.lane[0, LY.L_FISTG] = I0
    vx0 = V_DC - (PF.source_resistance_ohm + PF.dm_resistance_ohm) * I0
    st.lane[0, LY.L_FVX] = vx0
    out = np.zeros((1, len(FIELDS)))
    comp, gates = np.zeros(1, np.uint16), np.array([GATES], np.uint8)
    rows = []
    for k in range(PERIODS):
        comp[0] = round(duty(k) * PF.period_counts)
        i_start = st.i[0]
        st.step(k, comp, gates, out)
        rows.append((out[0, FIELDS.index("vterm_V")], i_start))
    return np.array(rows)


def reference_run() -> np.ndarray:
    """The same, the five states integrated together (and the X capacitor's voltage
    integrated over each period, for its mean)."""
    ls, rs, ldm, rdm, rd, cx = (
        PF.source_inductance_H,
        PF.source_resistance_ohm,
        PF.dm_inductance_H,
        PF.dm_resistance_ohm,
        PF.dm_damping_ohm,
        PF.x_capacitance_F,
    )
    lb, rb, c, esr = PF.inductance_H, PF.r_total_ohm, PF.capacitance_F, PF.capacitor_esr_ohm
    kesr = 1.0 / (1.0 + esr * G)

    def rhs(m):
        def f(t, x):
            i_s, i_m, vx, ib, vc, _ = x
            vbus = kesr * (vc + esr * m * ib)
            return [
                (V_DC - rs * i_s - vx - rd * (i_s - i_m)) / ls,
                (rd * (i_s - i_m) - rdm * i_m) / ldm,
                (i_s - ib) / cx,
                (vx - rb * ib - m * vbus) / lb,
                (m * ib - G * vbus) / c,
                vx,
            ]

        return f

    vx0 = V_DC - (rs + rdm) * I0
    x = np.array([I0, I0, vx0, I0, VBUS0, 0.0])
    rows = []
    for k in range(PERIODS):
        comp = round(duty(k) * PF.period_counts)
        i_start = x[3]
        x[5] = 0.0
        for a, b, qa in fast_intervals(comp, GATES, p=PF):
            assert x[3] > 0.0  # the current stays positive: a diode carries it up
            m = 1 if qa is None else qa  # low switch on: 0; high switch or its diode: 1
            sol = solve_ivp(rhs(m), (a, b), x, method="DOP853", rtol=1e-10, atol=1e-9)
            x = sol.y[:, -1]
        rows.append((x[5] / PF.period_s, i_start))
    return np.array(rows)


def _ring(x: np.ndarray) -> np.ndarray:
    """Half the change from one period to the next: the ring at about a quarter of fsw seen
    in period means alternates."""
    return 0.5 * np.abs(np.diff(x))


def test_filter_and_stage_together_against_solve_ivp():
    """After a dip of the duty rings the boost inductor with the X capacitor at their
    resonance (about a quarter of fsw here, where a model solved a period at a time is at its
    worst): the ring dies away in the plant as in the reference, the inductor's current at
    each period's start stays within 10 % of the reference's swing, and the X capacitor's
    period mean within 30 %. Those two figures are the accuracy this model reaches there,
    measured (6.5 % and 24 %; the stage seeing the X capacitor move linearly over the period,
    the filter the stage's period-average current); the coupling before this test, which
    predicted the X capacitor's end with the last period's current, reached 35 % and 94 %
    and its ring grew where the reference's dies away."""
    f_r = resonance_Hz()
    assert 0.2 < f_r / PF.fsw_Hz < 0.3
    got, ref = plant_run(), reference_run()
    swing = np.ptp(ref, axis=0)
    assert swing[0] > 5.0 and swing[1] > 2.0  # the dip did ring them
    after = slice(K_STEP + 2, PERIODS)
    early, late = slice(0, 10), slice(-10, None)
    for x in (ref[after, 0], got[after, 0]):
        r = _ring(x)
        assert r[late].mean() < 0.5 * r[early].mean()  # the ring dies away
    err = np.max(np.abs(got - ref), axis=0) / swing
    assert err[1] < 0.10 and err[0] < 0.30, err
