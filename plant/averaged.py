"""The averaged model of one lane over one PWM period: one exact update with the
period-average midpoint positions (``plant.kernel`` calls it for every lane)."""

from __future__ import annotations

import math

from .jit import jit
from .layout import (
    GATE_FAST_HI,
    GATE_FAST_LO,
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
    P_VREV,
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
from .losses import ac_copper_energy, core_energy, switching_energy
from .solver import circuit, segment, slow_rail


@jit
def period_averaged(par, plans, lane, j, vs, v_in, compare, gates, G, Icp, r_path, relay, out):
    """Averaged model: one exact update per period with the period-average midpoint
    positions, separately for positive and negative current, so that a path left to the
    diodes for part of the period blocks reversal (a simple account of discontinuous
    conduction).  The sample is the period average.  ``vs``: the grid source at mid-period;
    ``v_in``: the stage's input voltage there (the X capacitor's with a filter, else ``vs``).
    Same outputs as the switching period's, less the filter's (``plant.filt``), the losses
    the circuit does not carry estimated from the ripple (``_ripple_losses``)."""
    T, Lt, C, rc = par[P_T], par[P_LT], par[P_C], par[P_ESR]
    dl = min(max(compare / par[P_COUNTS], 0.0), 1.0)
    td = par[P_TDEAD] if (dl > 0.0 and dl < 1.0) else 0.0
    f_lo = dl
    f_dead = min(2.0 * td / T, 1.0 - dl)
    f_hi = 1.0 - f_lo - f_dead
    lo_on = 1.0 if (gates & GATE_FAST_LO) != 0 else 0.0
    hi_on = 1.0 if (gates & GATE_FAST_HI) != 0 else 0.0
    qb = slow_rail(gates, par[P_SDIODE] != 0.0)
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
    # the losses the circuit does not carry, from the period's ripple about its average
    # (``_ripple_losses``), taken out of the bus capacitor's energy as the switching model does
    e_sw, e_dt, e_core, e_acu, di = _ripple_losses(
        par, vb, v_in, iavg, f_lo * lo_on, f_hi * hi_on, lo_on != 0.0, hi_on != 0.0, td
    )
    # the ripple's own mean square in the path's resistance (a triangle: di^2/12), which the
    # exact update on the average does not carry
    q2r = di * di * T / 12.0
    out[R_I2] += q2r
    out[R_ELOSS] += r_path * q2r
    e_x = e_sw + e_dt + e_core + e_acu + r_path * q2r
    vc2 = vc1 * vc1 - 2.0 * e_x / C
    vc1 = math.sqrt(vc2) if vc2 > 0.0 else 0.0
    out[R_VC], out[R_IEND] = vc1, i1
    out[R_ESW], out[R_EDT], out[R_ECORE], out[R_EACU] = e_sw, e_dt, e_core, e_acu
    return i1, vc1


@jit
def _top_bottom(par, v_in, i, d_lo, d_hi, glo, ghi):
    """The current at its top (the low switch's turn-off) and bottom (the high one's)."""
    pos = i > 0.0 or (i == 0.0 and v_in >= 0.0)
    d_main = d_lo if pos else d_hi
    di = abs(v_in) * d_main * par[P_T] / par[P_LT]
    top, bottom = i + 0.5 * di, i - 0.5 * di
    if pos and not ghi:
        bottom = max(bottom, 0.0)
    if (not pos) and not glo:
        top = min(top, 0.0)
    return top, bottom


@jit
def _ripple_losses(par, vb, v_in, i, d_lo, d_hi, glo, ghi, td):
    """(switching, dead-time, core, AC copper) energy (J) and the ripple (A, top less bottom)
    of one period of the averaged
    model: the ripple the main switch's on-time gives, |v| d T / L (the main switch is the
    one the current's direction makes the boost switch: low for i > 0, high for i < 0; with
    no current, the half the line's sign gives), about the period's average current; the
    current at its top where the low switch turns off and at its bottom where the high one
    does, clamped at zero where a body diode, not a switch, would carry it back (the
    synchronous switch off: discontinuous conduction); the dead-time conduction at the two
    edges' currents.  Continuous conduction within the period otherwise."""
    top, bottom = _top_bottom(par, v_in, i, d_lo, d_hi, glo, ghi)
    e_sw = switching_energy(par, vb, v_in, glo, ghi, top, top, bottom, bottom)
    e_dt = par[P_VREV] * (abs(top) + abs(bottom)) * td
    swing = top - bottom
    return e_sw, e_dt, core_energy(par, swing), ac_copper_energy(par, swing), swing
