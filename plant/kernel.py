"""One PWM period of every lane: the period set-up (dip, inrush relay, load, the PWM's
sub-intervals and their source voltages), the switching period solved across lanes (the exact
solver's loops run over the batch; lanes that start or end at zero current, or whose relay is
open, are redone alone), the averaged model, records and ADC.

Everything here is plain Python on floats and numpy arrays: with numba the functions are
compiled to machine code (``plant.jit``), without it they run as they are (same results, far
slower).  One lane's numbers never depend on another lane's, so a scenario gives the same
bits alone or inside any batch.  Circuit and notation as in ``plant.stage``.
"""

from __future__ import annotations

import math

import numpy as np

from .adc import adc_channel, neutral_V
from .averaged import period_averaged
from .filt import advance, no_filter, period_end
from .jit import COMPILED, jit, jit_inline, jit_parallel
from .layout import (
    GATE_FAST_HI,
    GATE_FAST_LO,
    GATE_SLOW_HI,
    GATE_SLOW_LO,
    L_BYPASSED,
    L_C0,
    L_CONNECTED,
    L_CP,
    L_DIP_END,
    L_DIP_LEVEL,
    L_FISTG,
    L_FVX,
    L_I,
    L_POWER,
    L_RELAY_CMD,
    L_RELAY_T,
    L_S0,
    L_SN,
    L_VC,
    MODEL_SWITCHING,
    P_C,
    P_CONNECT,
    P_COUNTS,
    P_CSLOW,
    P_EDGE,
    P_ESR,
    P_FILT,
    P_LSRC,
    P_LT,
    P_QRR,
    P_RELAY_DELAY,
    P_RINRUSH,
    P_RSRC,
    P_RTOT,
    P_SDIODE,
    P_T,
    P_TDEAD,
    P_UVLO,
    P_VOUT,
    P_VREV,
    PLAN_DEAD,
    PLAN_HALF,
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
    W_A11,
    W_A12,
    W_A21,
    W_A22,
    W_B1,
    W_B2,
    W_B2LATE,
    W_DT,
    W_EDT,
    W_EIN,
    W_ESLOW,
    W_G,
    W_GHI,
    W_GLO,
    W_H,
    W_I,
    W_ICP,
    W_IMAX,
    W_IMIN,
    W_IS,
    W_ISEG,
    W_ISTART,
    W_K,
    W_M,
    W_MN,
    W_MP,
    W_MPREV,
    W_NOSW,
    W_P11,
    W_P12,
    W_P21,
    W_P22,
    W_Q,
    W_Q2,
    W_QM,
    W_QM2,
    W_RPATH,
    W_SAMP,
    W_SCALE,
    W_SFREE,
    W_SLOW,
    W_SN,
    W_V1,
    W_V2,
    W_VB,
    W_VBS,
    W_VC,
    W_VG0,
    W_VG1,
    W_VS,
    W_VSH,
    W_VXH,
    W_X1,
    W_X2,
    W_Y1,
    W_Y2,
)
from .losses import ac_copper_energy, core_energy, switching_energy
from .solver import (
    INV,
    INV_FACT,
    _m_pair,
    bus_k,
    circuit,
    conduction,
    piece_integrals,
    segment,
    slow_rail,
)
from .source import advance_phase, source_at


# -- one PWM period of one lane ------------------------------------------------------------
@jit_inline
def _relay_open(par, lane, j, t, relay):
    """The inrush limiter's bypass relay of lane ``j``: it follows the controller's command
    (``relay[j]`` bit 0: close) ``P_RELAY_DELAY`` s after the command changed, and never
    moves by itself; True while open (the limiter in the path)."""
    cmd = 1.0 if (relay[j] & 1) != 0 else 0.0
    if cmd != lane[j, L_RELAY_CMD]:
        lane[j, L_RELAY_CMD], lane[j, L_RELAY_T] = cmd, t
    if t - lane[j, L_RELAY_T] >= par[P_RELAY_DELAY]:
        lane[j, L_BYPASSED] = cmd
    return lane[j, L_BYPASSED] == 0.0


@jit_inline
def _load_terms(par, lane, j, vc):
    """(G, Icp) of lane ``j``'s load: it connects at power-good and drops out below its UVLO
    (the bus now: no current term); constant power as a current frozen over the period."""
    if vc >= par[P_CONNECT]:
        lane[j, L_CONNECTED] = 1.0
    elif vc < par[P_UVLO]:
        lane[j, L_CONNECTED] = 0.0
    G = Icp = 0.0
    if lane[j, L_CONNECTED] != 0.0:
        if lane[j, L_CP] != 0.0:
            Icp = lane[j, L_POWER] / max(vc, par[P_UVLO])
        else:
            G = lane[j, L_POWER] / par[P_VOUT] ** 2
    return G, Icp


@jit_inline
def _filter_ends(par, lane, harm, j, scale, s0, c0, ws):
    """With a filter: the source at the period's ends into ``ws`` and the X capacitor's
    voltage at the start; ``(0, 0)`` without one (the stage's input at T/2 is then the
    source's)."""
    if par[P_FILT] == 0.0:
        ws[W_VXH, j] = ws[W_VSH, j]
        return 0.0, 0.0
    v0 = source_at(lane, harm, j, scale, 0.0, s0, c0)
    v1 = source_at(lane, harm, j, scale, par[P_T], s0, c0)
    ws[W_VG0, j], ws[W_VG1, j] = v0, v1
    return lane[j, L_FVX], 0.0


@jit_inline
def _predicted_current(ws, j, vx, vc, r_path, Lt, T):
    """The stage's current averaged over the period ahead, walked sub-interval by sub-interval
    from its present value with the X capacitor held at ``vx`` and the bus at ``vc``: each
    sub-interval's slope (vx - R i - m vc)/L, m by the current's sign where a diode carries it,
    a diode's current stopping at zero. The filter then takes the stage's draw over the period
    into account when it predicts where the X capacitor will be at the period's end."""
    i = ws[W_I, j]
    acc = 0.0
    for seg in range(7):
        dt = ws[W_DT + seg, j]
        if dt <= 0.0:
            continue
        mp, mn = ws[W_MP + seg, j], ws[W_MN + seg, j]
        forced = mp == mn
        if forced or i > 0.0:
            m = mp
        elif i < 0.0:
            m = mn
        elif vx - mp * vc > 0.0:
            m = mp
        elif vx - mn * vc < 0.0:
            m = mn
        else:
            continue  # no path forward-biased: the current stays at zero
        slope = (vx - r_path * i - m * vc) / Lt
        i1 = i + slope * dt
        if not forced and ((i > 0.0 and i1 < 0.0) or (i < 0.0 and i1 > 0.0)):
            acc += 0.5 * i * (-i / slope)  # the diode's current falls to zero and stays
            i = 0.0
        else:
            acc += dt * 0.5 * (i + i1)
            i = i1
    return acc / T


@jit_inline
def _carrier_flags(ws, j, edge, dl, td, T, g):
    """Lane ``j``'s per-carrier flags: whether each fast switch gets on-time (``W_GLO``,
    ``W_GHI``), whether the centre-aligned dead time after t1 crosses T/2 (``W_B2LATE``), and
    the sub-interval whose end is the ADC sample (``W_SAMP``)."""
    if edge:
        ton = dl * T
        te = min(td, ton)
        ws[W_GLO, j] = 1.0 if ((g & GATE_FAST_LO) != 0 and ton > te) else 0.0
        ws[W_GHI, j] = 1.0 if ((g & GATE_FAST_HI) != 0 and min(ton + td, T) < T) else 0.0
        ws[W_B2LATE, j] = 0.0
        ws[W_SAMP, j] = 0.0 if 0.5 * ton <= te else 2.0
    else:
        t1 = dl * 0.5 * T
        t2 = T - t1
        b2_ = min(t1 + td, t2)
        ws[W_GLO, j] = 1.0 if ((g & GATE_FAST_LO) != 0 and t1 > 0.0) else 0.0
        ws[W_GHI, j] = 1.0 if ((g & GATE_FAST_HI) != 0 and t2 > b2_) else 0.0
        ws[W_B2LATE, j] = 1.0 if b2_ > 0.5 * T else 0.0
        ws[W_SAMP, j] = 2.0


@jit_inline
def _centre_bounds(seg, dl, td, T, qa_low, qa_high):
    """Sub-interval ``seg`` (start, end, fast-leg state) of the centre-aligned carrier: the
    low switch on for dl T/2 at each end, the high switch in the middle, the timer's dead time
    at each edge; the ADC samples at T/2, the end of sub-interval 2."""
    half = 0.5 * T
    t1 = dl * half
    t2 = T - t1
    b2_ = min(t1 + td, t2)
    b4 = min(t2 + td, T)
    if seg == 0:
        return 0.0, t1, qa_low
    if seg == 1:
        return t1, min(b2_, half), -1
    if seg == 2:
        return min(b2_, half), half, qa_high
    if seg == 3:
        return half, max(b2_, half), -1
    if seg == 4:
        return max(b2_, half), t2, qa_high
    if seg == 5:
        return t2, b4, -1
    return b4, T, qa_low


@jit_inline
def _edge_bounds(seg, dl, td, T, qa_low, qa_high):
    """Sub-interval ``seg`` of the edge-aligned carrier: the high switch off at the period
    start, the low one on after the dead time te and off at ton = dl T, the high one on after
    the dead time to the period's end; the ADC samples at ts = ton/2 (a second compare at half
    the low switch's), the end of sub-interval 0 (ts <= te) or 2; sub-interval 6 is empty."""
    ton = dl * T
    te = min(td, ton)
    ts = 0.5 * ton
    if seg == 0:
        return 0.0, min(te, ts), -1
    if seg == 1:
        return min(te, ts), te, -1
    if seg == 2:
        return te, max(te, ts), qa_low
    if seg == 3:
        return max(te, ts), ton, qa_low
    if seg == 4:
        return ton, min(ton + td, T), -1
    if seg == 5:
        return min(ton + td, T), T, qa_high
    return T, T, -1


@jit
def _period_setup(par, lane, harm, t, compare, gates, relay, ws, switching):
    """Per lane: dip, inrush relay, load terms and what stays fixed over the period; for the
    switching model also each sub-interval's duration, source voltage at its midpoint and
    midpoint difference ``m`` for positive and negative current."""
    n = lane.shape[0]
    T, Lt, C, rc = par[P_T], par[P_LT], par[P_C], par[P_ESR]
    half = 0.5 * T
    for j in range(n):
        scale = lane[j, L_DIP_LEVEL] if t < lane[j, L_DIP_END] else 1.0
        vc = lane[j, L_VC]
        relay_open = _relay_open(par, lane, j, t, relay)
        r_path = par[P_RTOT] + (par[P_RINRUSH] if relay_open else 0.0)
        G, Icp = _load_terms(par, lane, j, vc)
        inv_L, inv_C, kk, _, _, a22, b2, _, _ = circuit(Lt, C, rc, r_path, G, Icp)
        ws[W_G, j], ws[W_ICP, j], ws[W_K, j], ws[W_A22, j], ws[W_B2, j], ws[W_RPATH, j] = (
            G,
            Icp,
            kk,
            a22,
            b2,
            r_path,
        )
        ws[W_SLOW, j] = 1.0 if relay_open else 0.0
        ws[W_I, j], ws[W_VC, j] = lane[j, L_I], vc
        ws[W_SCALE, j] = scale
        s0, c0 = lane[j, L_S0], lane[j, L_C0]
        ws[W_VSH, j] = source_at(lane, harm, j, scale, half, s0, c0)
        filtered = par[P_FILT] != 0.0
        vxa, vxb = _filter_ends(par, lane, harm, j, scale, s0, c0, ws)
        if not switching:
            if filtered:  # the averaged model: the filter with the last period's current
                vxb = period_end(par, lane, j, ws[W_VG0, j], ws[W_VG1, j], lane[j, L_FISTG])[2]
                ws[W_VXH, j] = 0.5 * (vxa + vxb)
            continue
        dl = min(max(float(compare[j]) / par[P_COUNTS], 0.0), 1.0)
        td = par[P_TDEAD] if (dl > 0.0 and dl < 1.0) else 0.0
        g = int(gates[j])
        qb = slow_rail(g, par[P_SDIODE] != 0.0)
        # a slow switch turned on takes its midpoint to its rail at once, through its
        # channel: the node capacitance's energy over the step is lost (hard switching)
        sn = lane[j, L_SN]
        e_slow = 0.0
        if qb >= 0:
            dv = (qb - sn) * vc
            e_slow = 0.5 * par[P_CSLOW] * dv * dv
            sn = float(qb)
        ws[W_SN, j], ws[W_ESLOW, j] = sn, e_slow
        ws[W_SFREE, j] = 1.0 if (qb < 0 and par[P_CSLOW] > 0.0) else 0.0
        qa_low = 0 if (g & GATE_FAST_LO) != 0 else -1
        qa_high = 1 if (g & GATE_FAST_HI) != 0 else -1
        edge = par[P_EDGE] != 0.0
        _carrier_flags(ws, j, edge, dl, td, T, g)
        for seg in range(7):
            if edge:
                a, b, qa = _edge_bounds(seg, dl, td, T, qa_low, qa_high)
            else:
                a, b, qa = _centre_bounds(seg, dl, td, T, qa_low, qa_high)
            dt = max(b - a, 0.0)
            m_pos, m_neg = _m_pair(qa, qb)
            ws[W_NOSW + seg, j] = 1.0 if qa < 0 else 0.0
            ws[W_DT + seg, j] = dt
            ws[W_MP + seg, j], ws[W_MN + seg, j] = m_pos, m_neg
            ws[W_VS + seg, j] = a + 0.5 * dt  # the sub-interval's midpoint, for now
        if filtered:
            # where the filter takes the X capacitor by the period's end with the stage's
            # current predicted over it: the stage sees it move linearly from the start there
            i_pred = _predicted_current(ws, j, vxa, vc, r_path, Lt, T)
            vxb = period_end(par, lane, j, ws[W_VG0, j], ws[W_VG1, j], i_pred)[2]
            ws[W_VXH, j] = 0.5 * (vxa + vxb)
        for seg in range(7):
            tm = ws[W_VS + seg, j]
            if ws[W_DT + seg, j] <= 0.0:
                ws[W_VS + seg, j] = 0.0
            elif filtered:
                ws[W_VS + seg, j] = vxa + (vxb - vxa) * tm / T
            else:
                ws[W_VS + seg, j] = source_at(lane, harm, j, scale, tm, s0, c0)


@jit
def _solve_segment(par, plans, ws, n, seg, kind, pieces, order):
    """Sub-interval ``seg`` of every lane: the exact step over all lanes at once, lanes it does
    not cover redone alone, then the sub-interval's share of the period's integrals."""
    Lt, C, rc = par[P_LT], par[P_C], par[P_ESR]
    inv_L, inv_C = 1.0 / Lt, 1.0 / C
    G, ICP, K_, A22, B2, RPATH, SLOW = (
        ws[W_G],
        ws[W_ICP],
        ws[W_K],
        ws[W_A22],
        ws[W_B2],
        ws[W_RPATH],
        ws[W_SLOW],
    )
    IND, VC, X1, X2, M, MPREV = ws[W_I], ws[W_VC], ws[W_X1], ws[W_X2], ws[W_M], ws[W_MPREV]
    A11, A12, A21, B1 = ws[W_A11], ws[W_A12], ws[W_A21], ws[W_B1]
    V1, V2, Y1, Y2, H = ws[W_V1], ws[W_V2], ws[W_Y1], ws[W_Y2], ws[W_H]
    P11, P12, P21, P22 = ws[W_P11], ws[W_P12], ws[W_P21], ws[W_P22]
    Q, Q2, EIN, VB, IMAX, IMIN = ws[W_Q], ws[W_Q2], ws[W_EIN], ws[W_VB], ws[W_IMAX], ws[W_IMIN]
    QM, QM2 = ws[W_QM], ws[W_QM2]
    DT, VS, MP, MN = ws[W_DT + seg], ws[W_VS + seg], ws[W_MP + seg], ws[W_MN + seg]
    NOSW, EDT, vrev = ws[W_NOSW + seg], ws[W_EDT], par[P_VREV]
    SN, SFREE, cn, qrr = ws[W_SN], ws[W_SFREE], par[P_CSLOW], par[P_QRR]
    # matrices for conduction in the current's direction (forced: switches both ways), and
    # the first term of the series
    for j in range(n):
        m = MP[j] if (MP[j] == MN[j] or IND[j] > 0.0) else MN[j]
        a11, a12, a21, b1 = conduction(m, K_[j], rc, RPATH[j], VS[j], ICP[j], inv_L, inv_C)
        A11[j], A12[j], A21[j], B1[j], M[j] = a11, a12, a21, b1, m
        h = DT[j] * INV[pieces]
        H[j] = h
        P11[j], P12[j], P21[j], P22[j] = h * a11, h * a12, h * a21, h * A22[j]
        x1, x2 = IND[j], VC[j]
        X1[j], X2[j] = x1, x2
        v1 = a11 * x1 + a12 * x2 + b1
        v2 = a21 * x1 + A22[j] * x2 + B2[j]
        V1[j], V2[j], Y1[j], Y2[j] = v1, v2, v1, v2
    for piece in range(pieces):
        if piece > 0:  # a later piece starts from where the last one ended
            for j in range(n):
                v1 = A11[j] * X1[j] + A12[j] * X2[j] + B1[j]
                v2 = A21[j] * X1[j] + A22[j] * X2[j] + B2[j]
                V1[j], V2[j], Y1[j], Y2[j] = v1, v2, v1, v2
        for kk in range(1, order):
            c = INV_FACT[kk]
            for j in range(n):
                v1 = P11[j] * V1[j] + P12[j] * V2[j]
                v2 = P21[j] * V1[j] + P22[j] * V2[j]
                V1[j], V2[j] = v1, v2
                Y1[j] += c * v1
                Y2[j] += c * v2
        for j in range(n):
            X1[j] += H[j] * Y1[j]
            X2[j] += H[j] * Y2[j]
    # lanes the common step does not cover are done again, alone and exactly; then each
    # sub-interval's share of the period's integrals, piece by piece (``piece_integrals``)
    for j in range(n):
        dt = DT[j]
        i0, vc0, i1, vc1 = IND[j], VC[j], X1[j], X2[j]
        m = M[j]
        forced = MP[j] == MN[j]
        # a floating slow midpoint not on the rail the current needs swings first
        free = SFREE[j] != 0.0
        sn = SN[j]
        off_rail = free and ((i0 > 0.0 and sn != 0.0) or (i0 < 0.0 and sn != 1.0))
        redo = dt > 0.0 and (
            SLOW[j] != 0.0
            or off_rail
            or (not forced and (i0 == 0.0 or (i0 > 0.0 and i1 < 0.0) or (i0 < 0.0 and i1 > 0.0)))
        )
        i_hi = i_lo = i1
        if redo:
            relay = 1 if SLOW[j] != 0.0 else 0
            cc = (inv_L, inv_C, K_[j], rc, RPATH[j], A22[j], B2[j], G[j], ICP[j])
            i1, vc1, m, q, q2, qm, qm2, qb, sn, i_hi, i_lo = segment(
                i0,
                vc0,
                dt,
                MP[j],
                MN[j],
                VS[j],
                cc,
                plans[relay, kind, 0],
                plans[relay, kind, 1],
                sn,
                cn if free else 0.0,
                qrr,
            )
            SN[j] = sn
        else:
            if not dt > 0.0:
                m = MPREV[j]
            q, q2, qb = piece_integrals(
                A11[j],
                A12[j],
                A21[j],
                A22[j],
                B1[j],
                B2[j],
                i0,
                vc0,
                i1,
                vc1,
                dt,
                m,
                K_[j],
                rc,
                ICP[j],
            )
            qm, qm2 = m * q, m * m * q2
        Q[j] += q
        Q2[j] += q2
        if NOSW[j] != 0.0:  # neither fast switch on: a body diode (or third quadrant) carries it
            EDT[j] += vrev * abs(q)
        QM[j] += qm  # the bus capacitor sees m i: its ESR loss follows from these two
        QM2[j] += qm2
        EIN[j] += VS[j] * q
        VB[j] += qb
        IMAX[j] = max(IMAX[j], i_hi)
        IMIN[j] = min(IMIN[j], i_lo)
        IND[j], VC[j], MPREV[j] = i1, vc1, m


@jit
def _switching_period(par, plans, ws, n):
    """One switching period of every lane, sub-interval by sub-interval.  The exact solver
    runs over all lanes at once (loops the compiler vectorises) with the step plan of a
    closed limiter relay; a lane whose diode current starts at zero or reaches zero in the
    sub-interval, or whose relay is open, is then done again alone by ``segment``.  Either
    way a lane's numbers are its own."""
    rc = par[P_ESR]
    ICP, K_, IND, VC, MPREV = ws[W_ICP], ws[W_K], ws[W_I], ws[W_VC], ws[W_MPREV]
    Q, Q2, EIN, VB, IMAX, IMIN = ws[W_Q], ws[W_Q2], ws[W_EIN], ws[W_VB], ws[W_IMAX], ws[W_IMIN]
    for j in range(n):
        ws[W_ISTART, j] = IND[j]
        Q[j] = Q2[j] = EIN[j] = VB[j] = ws[W_QM, j] = ws[W_QM2, j] = ws[W_EDT, j] = 0.0
        IMAX[j] = IMIN[j] = IND[j]
        MPREV[j] = 0.0
    edge = par[P_EDGE] != 0.0
    for seg in range(7):
        # the longest a sub-interval can last: the dead time, half a period, or (the high
        # switch's of the edge-aligned carrier) a whole one
        if edge:
            kind = PLAN_DEAD if seg in (0, 1, 4) else (PLAN_PERIOD if seg == 5 else PLAN_HALF)
        else:
            kind = PLAN_DEAD if seg % 2 == 1 else PLAN_HALF
        pieces, order = plans[0, kind, 0], plans[0, kind, 1]
        DT = ws[W_DT + seg]
        # a sub-interval of zero length in every lane (the dead time at T/2, mostly) changes
        # nothing: passed over
        empty = True
        for j in range(n):
            if DT[j] > 0.0:
                empty = False
                break
        if not empty:
            _solve_segment(par, plans, ws, n, seg, kind, pieces, order)
        for j in range(n):
            ws[W_ISEG + seg, j] = IND[j]
        for j in range(n):  # the ADC sample, at the end of the sub-interval the carrier sets
            if ws[W_SAMP, j] == seg:
                ws[W_IS, j] = IND[j]
                ws[W_VBS, j] = bus_k(MPREV[j], IND[j], VC[j], ICP[j], rc, K_[j])


@jit
def step_lanes(par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, ws):
    """Advance every lane by period ``k`` (starting at ``t`` s) with the given compare
    (timer counts), gate masks and relay commands; write the ADC codes sampled in it into
    ``codes`` (n, 3) and the period's records into ``out`` (n, len(FIELDS)); ``ws`` is scratch
    space from ``workspace(n)``."""
    n = lane.shape[0]
    T = par[P_T]
    switching = model == MODEL_SWITCHING
    _period_setup(par, lane, harm, t, compare, gates, relay, ws, switching)
    if switching:
        _switching_period(par, plans, ws, n)
        f = 1.0 / T
        for j in range(n):
            vbus_avg = ws[W_VB, j] * f
            G, Icp = ws[W_G, j], ws[W_ICP, j]
            i_s = ws[W_IS, j]
            out[j, R_VS] = ws[W_VSH, j]
            out[j, R_IAVG] = ws[W_Q, j] * f
            if par[P_FILT] != 0.0:  # the sensed line is the X capacitor's (``plant.filt``)
                advance(par, lane, j, ws[W_VG0, j], ws[W_VG1, j], out[j, R_IAVG], out[j])
            else:
                # sensed line voltage: source less the drop of the period-average current on
                # the source impedance
                out[j, R_VTERM] = (
                    ws[W_VSH, j]
                    - par[P_RSRC] * i_s
                    - par[P_LSRC] * (ws[W_I, j] - ws[W_ISTART, j]) * f
                )
                no_filter(
                    par,
                    out[j],
                    out[j, R_IAVG],
                    ws[W_EIN, j],
                    ws[W_Q2, j],
                    ws[W_ISTART, j],
                    ws[W_I, j],
                )
            out[j, R_IMAX] = ws[W_IMAX, j]
            out[j, R_IMIN] = ws[W_IMIN, j]
            out[j, R_ISAMPLE] = i_s
            out[j, R_VBUS] = vbus_avg
            out[j, R_VBSAMPLE] = ws[W_VBS, j]
            out[j, R_EIN] = ws[W_EIN, j]
            out[j, R_EOUT] = T * (G * vbus_avg * vbus_avg + Icp * vbus_avg)
            out[j, R_ELOSS] = ws[W_RPATH, j] * ws[W_Q2, j]
            out[j, R_I2] = ws[W_Q2, j]
            # capacitor current m i - i_load with the load current of the period average:
            # ESR x (int m^2 i^2 - 2 i_load int m i + i_load^2 T)
            i_load = G * vbus_avg + Icp
            out[j, R_EESR] = par[P_ESR] * (
                ws[W_QM2, j] - 2.0 * i_load * ws[W_QM, j] + i_load * i_load * T
            )
            # the losses the circuit does not carry (``plant.losses``), taken out of the bus
            # capacitor's energy at the period's end
            di = ws[W_IMAX, j] - ws[W_IMIN, j]
            if par[P_EDGE] != 0.0:
                # low off at ton (end of 3), high on after the dead time (end of 4); high off
                # at the period's start (this period's start current), low on at te (end of 1)
                i_t1, i_b2 = ws[W_ISEG + 3, j], ws[W_ISEG + 4, j]
                i_t2, i_b4 = ws[W_ISTART, j], ws[W_ISEG + 1, j]
            else:
                i_t1 = ws[W_ISEG, j]
                i_b2 = ws[W_ISEG + 3, j] if ws[W_B2LATE, j] != 0.0 else ws[W_ISEG + 1, j]
                i_t2, i_b4 = ws[W_ISEG + 4, j], ws[W_ISEG + 5, j]
            e_sw = switching_energy(
                par, vbus_avg, ws[W_VXH, j], ws[W_GLO, j] != 0.0, ws[W_GHI, j] != 0.0,
                i_t1, i_b2, i_t2, i_b4,
            )  # fmt: skip
            e_core, e_acu = core_energy(par, di), ac_copper_energy(par, di)
            e_sw += ws[W_ESLOW, j]  # the slow leg's hard switching, if any
            e_x = e_sw + ws[W_EDT, j] + e_core + e_acu
            vc = ws[W_VC, j]
            vc2 = vc * vc - 2.0 * e_x / par[P_C]
            vc = math.sqrt(vc2) if vc2 > 0.0 else 0.0
            out[j, R_ESW], out[j, R_EDT], out[j, R_ECORE], out[j, R_EACU] = (
                e_sw,
                ws[W_EDT, j],
                e_core,
                e_acu,
            )
            out[j, R_VC], out[j, R_IEND] = vc, ws[W_I, j]
            lane[j, L_I], lane[j, L_VC] = ws[W_I, j], vc
            lane[j, L_SN] = ws[W_SN, j]
    else:
        for j in range(n):
            relay = 1 if ws[W_SLOW, j] != 0.0 else 0
            i, vc = period_averaged(
                par,
                plans,
                lane,
                j,
                ws[W_VSH, j],
                ws[W_VXH, j],
                float(compare[j]),
                int(gates[j]),
                ws[W_G, j],
                ws[W_ICP, j],
                ws[W_RPATH, j],
                relay,
                out[j],
            )
            if par[P_FILT] != 0.0:
                advance(par, lane, j, ws[W_VG0, j], ws[W_VG1, j], out[j, R_IAVG], out[j])
            else:
                no_filter(par, out[j], out[j, R_IAVG], out[j, R_EIN], out[j, R_I2], lane[j, L_I], i)
            lane[j, L_I], lane[j, L_VC] = i, vc
    split = codes.shape[1] == 4
    for j in range(n):
        if split:  # L and N apart, each to the bus minus
            vn = neutral_V(
                int(gates[j]),
                out[j, R_ISAMPLE],
                out[j, R_VTERM],
                out[j, R_VBSAMPLE],
                GATE_SLOW_LO,
                GATE_SLOW_HI,
            )
            codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, vn + out[j, R_VTERM])
            codes[j, 3] = adc_channel(par, lane, seed, j, k, 3, vn)
        else:
            codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, out[j, R_VTERM])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, out[j, R_ISAMPLE])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, out[j, R_VBSAMPLE])
        advance_phase(lane, j, T)


if COMPILED:
    from numba import get_num_threads, prange

    def threads() -> int:
        """numba's threads for a batch (``NUMBA_NUM_THREADS``, the cores by default)."""
        return int(get_num_threads())

else:  # pragma: no cover - without numba the chunks run one after another
    prange = range

    def threads() -> int:
        return 1


@jit_inline
def _step_chunk(
    par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, wss, bounds, c
):
    """``step_lanes`` over chunk ``c``'s lanes, with its scratch ``wss[c]``; its bounds."""
    a, b = bounds[c], bounds[c + 1]
    step_lanes(
        par, plans, lane[a:b], harm[a:b], seed[a:b], k, t, model, compare[a:b],
        gates[a:b], relay[a:b], codes[a:b], out[a:b], wss[c],
    )  # fmt: skip
    return a, b


@jit_parallel
def step_chunks(
    par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, wss, bounds
):
    """``step_lanes`` over the lanes ``bounds[c]:bounds[c + 1]`` of each chunk ``c``, the
    chunks on numba's threads, each with its own scratch ``wss[c]``: the lanes are
    independent, so a lane's numbers do not depend on the chunking."""
    for c in prange(bounds.shape[0] - 1):
        _step_chunk(
            par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, wss,
            bounds, c,
        )  # fmt: skip


@jit_parallel
def step_chunks_then(
    par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, wss, bounds,
    after, ctx,
):  # fmt: skip
    """``step_chunks``, then on the same thread ``after(ctx, k, first, end)`` for the chunk's
    lanes once their codes are written (a compiled function of signature
    void(uintptr, int64, uint32, uint32), whatever it does with them)."""
    for c in prange(bounds.shape[0] - 1):
        a, b = _step_chunk(
            par, plans, lane, harm, seed, k, t, model, compare, gates, relay, codes, out, wss,
            bounds, c,
        )  # fmt: skip
        after(ctx, k, np.uint32(a), np.uint32(b))
