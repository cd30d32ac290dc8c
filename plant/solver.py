"""The exact solution of one linear piece of the stage, ``x' = A x + b`` with ``x = (i, v_C)``:
the matrices of a conduction pattern, the bus terminal voltage, and one lane's advance over a
sub-interval with diode conduction and discontinuous current (event time by Newton).

Each piece is advanced by the series of the matrix exponential,
``x(t) = x0 + t sum_{j>=1} (tA)^(j-1)/j! (A x0 + b)``, to an order (and in as many pieces) as
``plant.linear.plan`` sets from a bound on ``|A| t``, so the truncation error stays below
1e-16 relative."""

from __future__ import annotations

import math

import numpy as np

from .jit import jit, jit_inline
from .layout import GATE_SLOW_HI, GATE_SLOW_LO

# -- linear pieces -----------------------------------------------------------------------
INV = np.array([0.0] + [1.0 / j for j in range(1, 40)])  # 1/j
INV_FACT = np.array([1.0 / math.factorial(k + 1) for k in range(40)])  # 1/(k+1)!


@jit
def advance(a11, a12, a21, a22, b1, b2, x1, x2, t, pieces, order):
    """State after ``t`` s of ``x' = A x + b`` from ``(x1, x2)``: in each piece of length
    ``h``, ``x += h sum_{k<order} (hA)^k w/(k+1)!`` with ``w = A x + b``.  The powers are
    built one product at a time and summed aside, so the chain of dependent operations
    per term is one multiply and one add."""
    h = t * INV[pieces]
    p11, p12, p21, p22 = h * a11, h * a12, h * a21, h * a22
    for _ in range(pieces):
        v1 = a11 * x1 + a12 * x2 + b1
        v2 = a21 * x1 + a22 * x2 + b2
        y1, y2 = v1, v2
        for k in range(1, order):
            v1, v2 = p11 * v1 + p12 * v2, p21 * v1 + p22 * v2
            y1 += INV_FACT[k] * v1
            y2 += INV_FACT[k] * v2
        x1, x2 = x1 + h * y1, x2 + h * y2
    return x1, x2


@jit_inline
def vbus_of(m, i, vc, G, Icp, rc):
    """Bus terminal voltage (V): capacitor plus the ESR drop of its current."""
    return (vc + rc * (m * i - Icp)) / (1.0 + rc * G)


@jit_inline
def bus_k(m, i, vc, Icp, rc, k):
    """Bus terminal voltage (V) with ``k = 1/(1 + ESR G)`` already formed (a product, no
    division)."""
    return (vc + rc * (m * i - Icp)) * k


@jit_inline
def conduction(m, k, rc, r_path, vs, Icp, inv_L, inv_C):
    """(a11, a12, a21, b1) of ``x' = A x + b`` with the midpoint difference ``m``; a22 and b2
    do not depend on it (``circuit``)."""
    km = m * k
    return -(r_path + km * rc * m) * inv_L, -km * inv_L, km * inv_C, (vs + km * rc * Icp) * inv_L


@jit_inline
def circuit(Lt, C, rc, r_path, G, Icp):
    """What stays fixed over a period: (1/L, 1/C, k = 1/(1 + ESR G), ESR, path resistance,
    a22, b2, G, Icp) of ``x' = A x + b`` (products only, no division, in each piece)."""
    inv_L, inv_C = 1.0 / Lt, 1.0 / C
    k = 1.0 / (1.0 + rc * G)
    return inv_L, inv_C, k, rc, r_path, -G * k * inv_C, -k * Icp * inv_C, G, Icp


@jit_inline
def piece_integrals(a11, a12, a21, a22, b1, b2, i0, vc0, i1, vc1, t, m, k, rc, Icp):
    """(int i dt, int i^2 dt, int v_bus dt) over one linear piece of length ``t`` from
    (i0, vc0) to (i1, vc1): the trapezoid with the end-point derivative correction
    (Euler-Maclaurin, ``t^2/12 (f'(0) - f'(t))``, exact to the cubic term), the derivatives from
    ``x' = A x + b`` itself."""
    c = t * t * (1.0 / 12.0)
    di0 = a11 * i0 + a12 * vc0 + b1
    di1 = a11 * i1 + a12 * vc1 + b1
    q = t * (i0 + i1) * 0.5 + c * (di0 - di1)
    q2 = t * (i0 * i0 + i1 * i1) * 0.5 + 2.0 * c * (i0 * di0 - i1 * di1)
    qv = t * (vc0 + vc1) * 0.5 + c * ((a21 * i0 + a22 * vc0 + b2) - (a21 * i1 + a22 * vc1 + b2))
    return q, q2, k * (qv + rc * (m * q - Icp * t))


@jit_inline
def _swing_state(t, ti0, b, alpha, wd, r, L):
    """(i~, e~) of the swing at ``t`` (the direction's frame, ``swing``)."""
    ea = math.exp(-alpha * t)
    c, s = math.cos(wd * t), math.sin(wd * t)
    it = ea * (ti0 * c + b * s)
    di = ea * ((-alpha * ti0 + wd * b) * c + (-alpha * b - wd * ti0) * s)
    return it, L * di + r * it


@jit
def swing(ti0, te0, dist, r, L, cn, t_max):
    """The slow leg's midpoint swung by the line current while neither slow device conducts:
    the loop's inductance ``L`` (resistance ``r``) against the node capacitance ``cn``, the bus
    and the line held over the swing (it lasts about (pi/2) sqrt(L cn), a microsecond or two).
    In the current's own direction (``ti0`` >= 0, the current; ``te0``: the voltage driving it
    at the start, the node's distance to the rail it moves toward included; ``dist``: that
    distance, V), ``L i' = e - r i`` and ``cn e' = -i``, solved in closed form (an underdamped
    series RLC).  Ends when the node reaches the rail (the other device takes the current),
    when the current comes back to zero first (the node rests part-way: the ring that follows
    is not followed), or at ``t_max``.  Returns (t, i, node moved V, int i dt, int i^2 dt,
    largest i, 1 rail reached / 2 current at zero / 0 time out)."""
    w0 = 1.0 / math.sqrt(L * cn)
    alpha = 0.5 * r / L
    if alpha >= 0.5 * w0:  # not a swing but a crawl: taken as done at once
        return 0.0, ti0, dist, cn * dist, 0.0, ti0, 1
    wd = math.sqrt(w0 * w0 - alpha * alpha)
    z = L * wd
    b = (te0 - 0.5 * r * ti0) / z
    zi = z * ti0
    rho = math.sqrt(te0 * te0 + zi * zi)
    phi = math.atan2(z * ti0, te0)  # in [0, pi]: the phase of e~ = rho cos(wd t + phi)
    # the current back at zero (wd t + phi = pi) and the node at the rail (e~ = te0 - dist),
    # from the undamped phases, then Newton on the damped solution
    tz = max(math.pi - phi, 0.0) / wd
    for _ in range(3):
        it, et = _swing_state(tz, ti0, b, alpha, wd, r, L)
        d = (et - r * it) / L
        if d != 0.0:
            tz = max(tz - it / d, 0.0)
    target = te0 - dist
    tr = math.inf
    if target > -rho:
        tr = max(math.acos(min(target / rho, 1.0)) - phi, 0.0) / wd
        for _ in range(3):
            it, et = _swing_state(tr, ti0, b, alpha, wd, r, L)
            if it != 0.0:
                tr = max(tr + (et - target) * cn / it, 0.0)
    how = 0
    t = t_max
    if tr <= tz and tr <= t_max:
        t, how = tr, 1
    elif tz < tr and tz <= t_max:
        t, how = tz, 2
    it, et = _swing_state(t, ti0, b, alpha, wd, r, L)
    if how == 2:
        it = 0.0
    moved = dist if how == 1 else min(te0 - et, dist)
    # int i dt from the node's charge; int i^2 dt from the undamped sine (the damping over a
    # swing is a part in 1e3 at most)
    q = cn * (te0 - et) if how != 1 else cn * dist
    x0, x1 = phi, phi + wd * t
    amp = rho / z
    q2 = amp * amp / wd * (0.5 * (x1 - x0) - 0.25 * (math.sin(2.0 * x1) - math.sin(2.0 * x0)))
    peak = max(ti0, it)
    if x0 < 0.5 * math.pi < x1:
        peak = max(peak, rho / z * math.exp(-alpha * (0.5 * math.pi - phi) / wd))
    return t, it, moved, q, q2, peak, how


@jit_inline
def _free_direction(i, sn, qa_pos, qa_neg, vs, vb0):
    """The current's direction with the slow midpoint floating at ``sn`` (of the bus): its
    sign, or from zero the way the loop's voltage drives it (0: neither)."""
    if i > 0.0 or (i == 0.0 and vs - (qa_pos - sn) * vb0 > 0.0):
        return 1
    if i < 0.0 or (i == 0.0 and vs - (qa_neg - sn) * vb0 < 0.0):
        return -1
    return 0


@jit
def _move_node(i, vc, sn, direction, qa, remaining, was_on, vs, vb0, cc, cn, qrr):
    """The floating slow midpoint taken toward the rail the current's ``direction`` needs,
    the fast midpoint on rail ``qa``: first the reverse recovery of the diode that conducted
    (``was_on``, ``qrr`` > 0), then the swing (``swing``).  Returns (i, vc, sn, time used,
    int i dt, int i^2 dt, int m i dt, int m^2 i^2 dt, int v_bus dt, the extreme current, m)."""
    inv_L, inv_C, _, _, r_path, _, _, G, Icp = cc
    te = direction * (vs - (qa - sn) * vb0)
    ti = abs(i)
    sq = sq2 = sqm = sqm2 = sqb = 0.0
    used = 0.0
    rail = 0.0 if direction < 0 else 1.0  # the rail it leaves (a diode's)
    if was_on and qrr > 0.0 and ti == 0.0 and sn == rail and te > 0.0:
        # reverse recovery: the diode that conducted takes current backwards, the midpoint
        # held on its rail, until its stored charge is swept
        t_rr = min(math.sqrt(2.0 * qrr / (te * inv_L)), remaining)
        ti = te * inv_L * t_rr
        q, q2, m_rr = direction * 0.5 * ti * t_rr, ti * ti * t_rr / 3.0, qa - sn
        sq, sq2, sqm, sqm2, sqb = q, q2, m_rr * q, m_rr * m_rr * q2, vb0 * t_rr
        vc += (m_rr * q - (G * vb0 + Icp) * t_rr) * inv_C
        used = t_rr
        if not remaining - used > 0.0:
            return direction * ti, vc, sn, used, sq, sq2, sqm, sqm2, sqb, direction * ti, m_rr
    dist = (sn if direction > 0 else 1.0 - sn) * vb0
    t, ti1, moved, q, q2, pk, how = swing(ti, te, dist, r_path, 1.0 / inv_L, cn, remaining - used)
    # the midpoint's capacitance splits between the rails: the bus sees half the node's
    # current against the fast leg's
    m_sw = qa - 0.5
    q = direction * q
    sq, sq2, sqm, sqm2, sqb = (
        sq + q,
        sq2 + q2,
        sqm + m_sw * q,
        sqm2 + m_sw * m_sw * q2,
        sqb + vb0 * t,
    )
    vc += (m_sw * q - (G * vb0 + Icp) * t) * inv_C
    if how == 1:
        sn = 0.0 if direction > 0 else 1.0
    else:
        step = moved / vb0 if vb0 > 0.0 else 0.0
        sn = min(max(sn - step if direction > 0 else sn + step, 0.0), 1.0)
    return direction * ti1, vc, sn, used + t, sq, sq2, sqm, sqm2, sqb, direction * pk, m_sw


@jit
def segment(i, vc, dt, m_pos, m_neg, vs, cc, pieces, order, sn, cn, qrr):
    """Advance one lane by ``dt`` s; ``m_pos``/``m_neg`` apply while the current is
    positive/negative (equal where switches conduct both ways); ``cc`` from ``circuit``.
    A diode current that reaches zero stays there (discontinuous conduction) until a path
    is forward-biased again; its zero time is found by Newton on the exact solution.

    ``cn`` > 0: neither slow device is switched on, and the slow midpoint (``sn``: where it
    is, a fraction of the bus) has that capacitance: ``m_pos``/``m_neg`` are then the fast
    midpoint's rail less the slow one's rail for each direction (0 and 1), and a current
    that needs the midpoint on the other rail first swings it there (``swing``); with
    ``qrr`` > 0 (a diode slow leg), a current the loop reverses right after the diode
    conducted first sweeps that charge out of it, the midpoint held, the current ramping at
    the voltage that drives it (the resistance and the bus's move over a fraction of a
    microsecond left out), and then swings the midpoint.  The bus and the line are held
    over a swing and the recovery; the bus capacitor then takes their charge.

    Returns (i, vc, m used, int i dt, int i^2 dt, int m i dt, int m^2 i^2 dt, int v_bus dt,
    sn, largest i, smallest i), the integrals taken piece by piece (``piece_integrals``)."""
    inv_L, inv_C, k, rc, r_path, a22, b2, G, Icp = cc
    forced = m_pos == m_neg
    free = cn > 0.0 and not forced
    remaining = dt
    m_used = 0.0
    sq = sq2 = sqm = sqm2 = sqb = 0.0
    i_hi = i_lo = i
    was_on = False  # the slow diode carried the current until it came to zero just now
    for _ in range(8):
        if not remaining > 0.0:
            break
        vb0 = (vc - rc * Icp) * k
        direction = 0
        if free:
            direction = _free_direction(i, sn, m_pos, m_neg + 1.0, vs, vb0)
            if (direction > 0 and sn > 0.0) or (direction < 0 and sn < 1.0):
                qa = m_pos if direction > 0 else m_neg + 1.0
                i, vc, sn, t, q, q2, qm, qm2, qb, pk, m_used = _move_node(
                    i, vc, sn, direction, qa, remaining, was_on, vs, vb0, cc, cn, qrr
                )
                sq, sq2, sqm, sqm2, sqb = sq + q, sq2 + q2, sqm + qm, sqm2 + qm2, sqb + qb
                i_hi, i_lo = max(i_hi, pk), min(i_lo, pk)
                remaining -= t
                was_on = False
                continue
        if free:
            start_pos, start_neg = direction > 0, direction < 0
        else:
            start_pos = (i > 0.0) or (i == 0.0 and not forced and vs - m_pos * vb0 > 0.0)
            start_neg = (i < 0.0) or (i == 0.0 and not forced and vs - m_neg * vb0 < 0.0)
        zero = False
        if forced or start_pos:
            m = m_pos
        elif start_neg:
            m = m_neg
        else:
            m = 0.0
            zero = True
        if zero:  # the inductor carries nothing: only the capacitor moves
            a11 = a12 = a21 = b1 = 0.0
        else:
            a11, a12, a21, b1 = conduction(m, k, rc, r_path, vs, Icp, inv_L, inv_C)
        t = remaining
        i1, vc1 = advance(a11, a12, a21, a22, b1, b2, i, vc, t, pieces, order)
        m_used = m
        flips = (i > 0.0 and i1 < 0.0) or (i < 0.0 and i1 > 0.0)
        cross = (not forced) and (not zero) and flips
        if not cross:
            q, q2, qb = piece_integrals(
                a11, a12, a21, a22, b1, b2, i, vc, i1, vc1, t, m, k, rc, Icp
            )
            sq, sq2, sqm, sqm2, sqb = sq + q, sq2 + q2, sqm + m * q, sqm2 + m * m * q2, sqb + qb
            i, vc = i1, vc1
            i_hi, i_lo = max(i_hi, i), min(i_lo, i)
            break
        # diode current reaches zero inside the step: when (chord, then two Newton steps)
        tz = min(max(t * i / (i - i1), 0.0), t)
        for _ in range(2):
            iz, vz = advance(a11, a12, a21, a22, b1, b2, i, vc, tz, pieces, order)
            di = a11 * iz + a12 * vz + b1
            if di != 0.0:
                tz = min(max(tz - iz / di, 0.0), t)
        iz, vz = advance(a11, a12, a21, a22, b1, b2, i, vc, tz, pieces, order)
        q, q2, qb = piece_integrals(a11, a12, a21, a22, b1, b2, i, vc, iz, vz, tz, m, k, rc, Icp)
        sq, sq2, sqm, sqm2, sqb = sq + q, sq2 + q2, sqm + m * q, sqm2 + m * m * q2, sqb + qb
        i, vc = 0.0, vz
        was_on = free
        remaining = max(remaining - tz, 0.0)
    return i, vc, m_used, sq, sq2, sqm, sqm2, sqb, sn, i_hi, i_lo


@jit_inline
def slow_rail(g, diode):
    """The slow midpoint's rail from the gate mask ``g``: 0 (its low switch on), 1 (its high
    switch on) or -1 (neither, both, or a slow leg of ``diode``s: the current's sign picks)."""
    if diode:
        return -1
    s_lo = (g & GATE_SLOW_LO) != 0
    s_hi = (g & GATE_SLOW_HI) != 0
    return 0 if (s_lo and not s_hi) else (1 if (s_hi and not s_lo) else -1)


@jit_inline
def _m_pair(qa, qb):
    """(m for i > 0, m for i < 0) with the midpoints fixed (0/1) or free (-1: diode)."""
    m_pos = (qa if qa >= 0 else 1) - (qb if qb >= 0 else 0)
    m_neg = (qa if qa >= 0 else 0) - (qb if qb >= 0 else 1)
    return float(m_pos), float(m_neg)
