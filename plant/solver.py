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


@jit
def segment(i, vc, dt, m_pos, m_neg, vs, cc, pieces, order):
    """Advance one lane by ``dt`` s; ``m_pos``/``m_neg`` apply while the current is
    positive/negative (equal where switches conduct both ways); ``cc`` from ``circuit``.
    A diode current that reaches zero stays there (discontinuous conduction) until a path
    is forward-biased again; its zero time is found by Newton on the exact solution.
    Returns (i, vc, m used, int i dt, int i^2 dt, int m i dt, int m^2 i^2 dt, int v_bus dt),
    the integrals taken piece by piece (``piece_integrals``)."""
    inv_L, inv_C, k, rc, r_path, a22, b2, G, Icp = cc
    forced = m_pos == m_neg
    remaining = dt
    m_used = 0.0
    sq = sq2 = sqm = sqm2 = sqb = 0.0
    for _ in range(3):
        if not remaining > 0.0:
            break
        vb0 = (vc - rc * Icp) * k
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
        remaining = max(remaining - tz, 0.0)
    return i, vc, m_used, sq, sq2, sqm, sqm2, sqb


@jit_inline
def _m_pair(qa, qb):
    """(m for i > 0, m for i < 0) with the midpoints fixed (0/1) or free (-1: diode)."""
    m_pos = (qa if qa >= 0 else 1) - (qb if qb >= 0 else 0)
    m_neg = (qa if qa >= 0 else 0) - (qb if qb >= 0 else 1)
    return float(m_pos), float(m_neg)
