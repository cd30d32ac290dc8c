"""The averaged model of one lane over one PWM period: one exact update with the
period-average midpoint positions (``plant.kernel`` calls it for every lane)."""

from __future__ import annotations

from .jit import jit
from .layout import (
    GATE_FAST_HI,
    GATE_FAST_LO,
    GATE_SLOW_HI,
    GATE_SLOW_LO,
    L_I,
    L_VC,
    P_C,
    P_COUNTS,
    P_ESR,
    P_LSRC,
    P_LT,
    P_RSRC,
    P_SDIODE,
    P_T,
    P_TDEAD,
    PLAN_PERIOD,
    R_EACU,
    R_ECORE,
    R_EDT,
    R_EESR,
    R_EIN,
    R_ELOSS,
    R_EOUT,
    R_ESW,
    R_I2,
    R_IAVG,
    R_IEND,
    R_IMAX,
    R_IMIN,
    R_ISAMPLE,
    R_VBSAMPLE,
    R_VBUS,
    R_VC,
    R_VS,
    R_VTERM,
)
from .solver import circuit, segment


@jit
def period_averaged(par, plans, lane, j, vs, v_in, compare, gates, G, Icp, r_path, relay, out):
    """Averaged model: one exact update per period with the period-average midpoint
    positions, separately for positive and negative current, so that a path left to the
    diodes for part of the period blocks reversal (a simple account of discontinuous
    conduction).  The sample is the period average.  ``vs``: the grid source at mid-period;
    ``v_in``: the stage's input voltage there (the X capacitor's with a filter, else ``vs``).
    Same outputs as the switching period's, less the filter's (``plant.filt``)."""
    T, Lt, C, rc = par[P_T], par[P_LT], par[P_C], par[P_ESR]
    dl = min(max(compare / par[P_COUNTS], 0.0), 1.0)
    td = par[P_TDEAD] if (dl > 0.0 and dl < 1.0) else 0.0
    f_lo = dl
    f_dead = min(2.0 * td / T, 1.0 - dl)
    f_hi = 1.0 - f_lo - f_dead
    lo_on = 1.0 if (gates & GATE_FAST_LO) != 0 else 0.0
    hi_on = 1.0 if (gates & GATE_FAST_HI) != 0 else 0.0
    s_lo = (gates & GATE_SLOW_LO) != 0
    s_hi = (gates & GATE_SLOW_HI) != 0
    qb = 0 if (s_lo and not s_hi) else (1 if (s_hi and not s_lo) else -1)
    if par[P_SDIODE] != 0.0:  # a slow leg of diodes: no gate moves it
        qb = -1
    qb_pos = qb if qb >= 0 else 0
    qb_neg = qb if qb >= 0 else 1
    # fraction of the period the fast midpoint is on the plus rail, by current sign
    m_pos = (1.0 - f_lo * lo_on) - qb_pos
    m_neg = f_hi * hi_on - qb_neg
    i0, vc0 = lane[j, L_I], lane[j, L_VC]
    cc = circuit(Lt, C, rc, r_path, G, Icp)
    i1, vc1, m, q, q2, qm, _, qb, _, _, _ = segment(
        i0,
        vc0,
        T,
        m_pos,
        m_neg,
        v_in,
        cc,
        plans[relay, PLAN_PERIOD, 0],
        plans[relay, PLAN_PERIOD, 1],
        0.0,
        0.0,
        0.0,
    )
    vb = qb / T
    iavg = q / T
    out[R_VS] = vs
    out[R_VTERM] = vs - par[P_RSRC] * iavg - par[P_LSRC] * (i1 - i0) / T
    out[R_IAVG] = iavg
    out[R_IMAX] = max(i0, i1)
    out[R_IMIN] = min(i0, i1)
    out[R_ISAMPLE] = iavg
    out[R_VBUS] = vb
    out[R_VBSAMPLE] = vb
    out[R_EIN] = v_in * q
    out[R_EOUT] = T * (G * vb**2 + Icp * vb)
    out[R_ELOSS] = r_path * q2
    out[R_I2] = q2
    # capacitor current m i - i_load; |m| is the fraction of the period the bus sees the current
    i_load = G * vb + Icp
    out[R_EESR] = rc * (abs(m) * q2 - 2.0 * i_load * qm + i_load * i_load * T)
    out[R_VC], out[R_IEND] = vc1, i1
    # the averaged model has no transitions: no switching, dead-time, core or AC copper loss
    out[R_ESW] = out[R_EDT] = out[R_ECORE] = out[R_EACU] = 0.0
    return i1, vc1
