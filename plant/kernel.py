"""The plant's arithmetic for a batch of lanes, compiled with numba when it is installed.

Everything here is plain Python on floats and numpy arrays: with numba the functions are
compiled to machine code (``@jit``), without it they run as they are (same results, far
slower).  One lane's numbers never depend on another lane's, so a scenario gives the same
bits alone or inside any batch.

Circuit and notation as in ``plant.stage``: state ``i`` (A, inductor = line current) and
``vc`` (V, capacitor); ``m = q_A - q_B`` the midpoint difference (fractional in the
averaged model); load conductance ``G`` (S) and constant-power current ``Icp`` (A).

Each linear piece ``x' = A x + b`` is advanced exactly by the series of the matrix
exponential, ``x(t) = x0 + t sum_{j>=1} (tA)^(j-1)/j! (A x0 + b)``, to an order (and in as
many pieces) as ``plant.linear.plan`` sets from a bound on ``|A| t``, so the truncation
error stays below 1e-16 relative.

Layout, chosen for speed (measured by ``pfcrig bench``): a lane's settings and state sit side
by side (``lane``, shape (n, LANE_ROWS)); the switching period's working numbers sit in rows
over the lanes (``ws``), so the solver's inner loops run across lanes and the compiler turns
them into vector instructions.
"""
from __future__ import annotations

import math

import numpy as np

from design.contract import Gate

try:  # numba compiles the kernels; without it they run as Python
    from numba import njit as _njit

    def jit(fn):
        # error_model="numpy": a division by zero gives inf/nan as in numpy, with no check per division
        return _njit(cache=True, nogil=True, error_model="numpy")(fn)

    def jit_inline(fn):
        """A small helper, inlined where it is called (no call, no reference counting of its
        array arguments)."""
        return _njit(cache=True, nogil=True, error_model="numpy", inline="always")(fn)

    COMPILED = True
except ImportError:  # pragma: no cover - exercised only where numba is missing
    def jit(fn):
        return fn

    jit_inline = jit
    COMPILED = False

SQRT2 = math.sqrt(2.0)
TWO_PI = 2.0 * math.pi

# columns of the per-lane float state (``lane`` array, shape (n, LANE_ROWS): a lane's numbers side by side)
(L_I, L_VC, L_BYPASSED, L_CONNECTED, L_THETA, L_VRMS, L_FREQ, L_DC, L_DIP_END, L_DIP_LEVEL, L_POWER, L_CP,
 L_GAIN0, L_GAIN1, L_GAIN2, L_OFF0, L_OFF1, L_OFF2, L_NOISE0, L_NOISE1, L_NOISE2, L_S0, L_C0) = range(23)
LANE_ROWS = 23  # L_S0, L_C0: sin and cos of L_THETA, carried along by rotation

# entries of the parameter vector (``par``)
(P_LT, P_C, P_ESR, P_RTOT, P_RINRUSH, P_TDEAD, P_T, P_COUNTS, P_RSRC, P_LSRC, P_CLOSE, P_OPEN, P_VOUT, P_CONNECT,
 P_UVLO, P_FULL, P_VAC_CPV, P_VAC_OFF, P_IL_CPA, P_IL_OFF, P_VBUS_CPV) = range(21)  # CPV/CPA: counts per V/A
PAR_ROWS = 21

# plant records per period (columns of ``out``, shape (n, len(FIELDS))), in this order
FIELDS = ("vs_V", "vterm_V", "i_avg_A", "i_max_A", "i_min_A", "i_sample_A", "vbus_V", "vbus_sample_V", "e_in_J",
          "e_out_J", "e_loss_J")
(R_VS, R_VTERM, R_IAVG, R_IMAX, R_IMIN, R_ISAMPLE, R_VBUS, R_VBSAMPLE, R_EIN, R_EOUT, R_ELOSS) = range(len(FIELDS))

# gate bits of the controller contract, as plain ints (compile-time constants of the kernels)
GATE_FAST_LO, GATE_FAST_HI, GATE_SLOW_LO, GATE_SLOW_HI = (int(g) for g in Gate)
MODEL_SWITCHING, MODEL_AVERAGED = 0, 1
# step plans: plans[relay open (0/1), kind, 0 pieces / 1 order]; kinds:
PLAN_HALF, PLAN_DEAD, PLAN_PERIOD = 0, 1, 2


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
    """Bus terminal voltage (V) with ``k = 1/(1 + ESR G)`` already formed (a product, no division)."""
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


@jit
def segment(i, vc, dt, m_pos, m_neg, vs, cc, pieces, order):
    """Advance one lane by ``dt`` s; ``m_pos``/``m_neg`` apply while the current is
    positive/negative (equal where switches conduct both ways); ``cc`` from ``circuit``.
    A diode current that reaches zero stays there (discontinuous conduction) until a path
    is forward-biased again; its zero time is found by Newton on the exact solution.
    Returns (i, vc, m used)."""
    inv_L, inv_C, k, rc, r_path, a22, b2, G, Icp = cc
    forced = m_pos == m_neg
    remaining = dt
    m_used = 0.0
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
        cross = (not forced) and (not zero) and ((i > 0.0 and i1 < 0.0) or (i < 0.0 and i1 > 0.0))
        if not cross:
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
        i, vc = 0.0, vz
        remaining = max(remaining - tz, 0.0)
    return i, vc, m_used


# -- the grid source -----------------------------------------------------------------------
@jit_inline
def source_at(lane, harm, j, scale, t, s0, c0):
    """Source voltage (V) of lane ``j`` at ``t`` s after the present period start;
    ``harm[j, h] = (order, amplitude fraction, phase rad)``, shape (n, orders, 3); ``s0, c0``
    = sin, cos of the phase at the period start.  The fundamental by angle addition, with sin and cos of the small advance ``x = 2 pi f t``
    from their series (to below 1e-18 for |x| <= 0.05 rad; larger ``x`` by the library)."""
    x = TWO_PI * lane[j, L_FREQ] * t
    sx, cx = small_sin_cos(x)
    wave = s0 * cx + c0 * sx
    if harm.shape[1]:
        th = lane[j, L_THETA] + x
        for h in range(harm.shape[1]):
            wave = wave + harm[j, h, 1] * math.sin(harm[j, h, 0] * th + harm[j, h, 2])
    return SQRT2 * lane[j, L_VRMS] * scale * wave + lane[j, L_DC]


# -- one PWM period of one lane ------------------------------------------------------------
@jit_inline
def _m_pair(qa, qb):
    """(m for i > 0, m for i < 0) with the midpoints fixed (0/1) or free (-1: diode)."""
    m_pos = (qa if qa >= 0 else 1) - (qb if qb >= 0 else 0)
    m_neg = (qa if qa >= 0 else 0) - (qb if qb >= 0 else 1)
    return float(m_pos), float(m_neg)


@jit
def period_averaged(par, plans, lane, harm, j, scale, compare, gates, G, Icp, r_path, relay, out):
    """Averaged model: one exact update per period with the period-average midpoint
    positions, separately for positive and negative current, so that a path left to the
    diodes for part of the period blocks reversal (a simple account of discontinuous
    conduction).  The sample is the period average.  Same outputs as ``period_switching``."""
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
    qb_pos = qb if qb >= 0 else 0
    qb_neg = qb if qb >= 0 else 1
    # fraction of the period the fast midpoint is on the plus rail, by current sign
    m_pos = (1.0 - f_lo * lo_on) - qb_pos
    m_neg = f_hi * hi_on - qb_neg
    vs = source_at(lane, harm, j, scale, T / 2.0, lane[j, L_S0], lane[j, L_C0])
    i0, vc0 = lane[j, L_I], lane[j, L_VC]
    cc = circuit(Lt, C, rc, r_path, G, Icp)
    i1, vc1, m = segment(i0, vc0, T, m_pos, m_neg, vs, cc, plans[relay, PLAN_PERIOD, 0], plans[relay, PLAN_PERIOD, 1])
    vb = (vbus_of(m, i0, vc0, G, Icp, rc) + vbus_of(m, i1, vc1, G, Icp, rc)) / 2.0
    iavg = (i0 + i1) / 2.0
    out[R_VS] = vs
    out[R_VTERM] = vs - par[P_RSRC] * iavg - par[P_LSRC] * (i1 - i0) / T
    out[R_IAVG] = iavg
    out[R_IMAX] = max(i0, i1)
    out[R_IMIN] = min(i0, i1)
    out[R_ISAMPLE] = iavg
    out[R_VBUS] = vb
    out[R_VBSAMPLE] = vb
    out[R_EIN] = T * vs * iavg
    out[R_EOUT] = T * (G * vb**2 + Icp * vb)
    out[R_ELOSS] = r_path * (T * (i0 * i0 + i0 * i1 + i1 * i1) / 3.0)
    return i1, vc1


# -- the ADC -------------------------------------------------------------------------------
@jit
def _splitmix(x):
    z = x + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@jit
def gauss(seed, k, ch):
    """A standard normal draw from (seed, conversion k, channel ch) only: splitmix64, then
    Box-Muller, so a lane's noise is the same alone or in any batch."""
    base = _splitmix(seed ^ np.uint64((k * 8 + ch) & 0x7FFFFFFFFFFFFFFF))
    u1 = np.float64(_splitmix(base) >> np.uint64(11)) * (1.0 / 9007199254740992.0)
    u2 = np.float64(_splitmix(base ^ np.uint64(0xD1B54A32D192ED03)) >> np.uint64(11)) * (1.0 / 9007199254740992.0)
    return math.sqrt(-2.0 * math.log1p(-u1)) * math.cos(TWO_PI * u2)


@jit_inline
def adc_channel(par, lane, seed, j, k, ch, x):
    """Code of channel ``ch`` (0 line voltage V, 1 inductor current A, 2 bus V) of lane ``j``
    in conversion ``k``: scaling, gain and offset errors, seeded noise, rounding to the
    nearest code, rails."""
    if ch == 0:
        raw = par[P_VAC_OFF] + x * (1.0 + lane[j, L_GAIN0]) * par[P_VAC_CPV]
    elif ch == 1:
        raw = par[P_IL_OFF] + x * (1.0 + lane[j, L_GAIN1]) * par[P_IL_CPA]
    else:
        raw = x * (1.0 + lane[j, L_GAIN2]) * par[P_VBUS_CPV]
    raw = raw + lane[j, L_OFF0 + ch]
    z = lane[j, L_NOISE0 + ch]
    if z != 0.0:
        raw = raw + z * gauss(seed[j], k, ch)
    return np.uint16(min(max(np.rint(raw), 0.0), par[P_FULL]))


@jit
def adc_lanes(par, lane, seed, k, vac, il, vbus, codes):
    """Conversion ``k`` of every lane: ``codes[j] = (vac, il, vbus)`` codes of lane ``j``."""
    for j in range(lane.shape[0]):
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, vac[j])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, il[j])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, vbus[j])


# -- one period of every lane ----------------------------------------------------------------
# rows of the workspace ``ws`` (shape (WS_ROWS, >= n)): per-lane numbers of the present period, a row
# per quantity so that the solver's loops run over lanes; see ``workspace`` for its row length
(W_G, W_ICP, W_K, W_A22, W_B2, W_RPATH, W_SLOW, W_SCALE, W_I, W_VC, W_X1, W_X2, W_M, W_MPREV, W_A11, W_A12, W_A21,
 W_B1, W_V1, W_V2, W_Y1, W_Y2, W_P11, W_P12, W_P21, W_P22, W_H, W_Q, W_Q2, W_EIN, W_VB, W_IMAX, W_IMIN, W_ISTART,
 W_IS, W_VBS, W_VSH, W_DT, W_VS, W_MP, W_MN) = (*range(37), 37, 44, 51, 58)  # the last four: 7 rows each
WS_ROWS = 65
THIRD = 1.0 / 3.0


def workspace(n: int) -> np.ndarray:
    """Scratch space for ``step_lanes``: rows of a length whose byte stride is an odd number
    of cache lines, so that the same lane's entries in the many rows do not all fall into the
    same few cache sets (a power-of-two stride made every store a conflict miss)."""
    cols = 8 * ((n + 7) // 8)
    if (cols // 8) % 2 == 0:
        cols += 8
    return np.zeros((WS_ROWS, cols))


@jit
def _period_setup(par, lane, harm, t, compare, gates, ws, switching):
    """Per lane: dip, inrush relay, load terms and what stays fixed over the period; for the
    switching model also each sub-interval's duration, source voltage at its midpoint and
    midpoint difference ``m`` for positive and negative current."""
    n = lane.shape[0]
    T, Lt, C, rc = par[P_T], par[P_LT], par[P_C], par[P_ESR]
    half = 0.5 * T
    for j in range(n):
        scale = lane[j, L_DIP_LEVEL] if t < lane[j, L_DIP_END] else 1.0
        vc = lane[j, L_VC]
        # inrush limiter relay: autonomous hardware, hysteretic on the bus against the line peak
        if par[P_RINRUSH] > 0.0:
            vpk = SQRT2 * lane[j, L_VRMS]
            if vc >= par[P_CLOSE] * vpk:
                lane[j, L_BYPASSED] = 1.0
            elif vc < par[P_OPEN] * vpk:
                lane[j, L_BYPASSED] = 0.0
        relay_open = lane[j, L_BYPASSED] == 0.0
        r_path = par[P_RTOT] + (par[P_RINRUSH] if relay_open else 0.0)
        # load: connects at power-good, drops out below its UVLO (the bus now: no current term)
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
        inv_L, inv_C, kk, _, _, a22, b2, _, _ = circuit(Lt, C, rc, r_path, G, Icp)
        ws[W_G, j], ws[W_ICP, j], ws[W_K, j], ws[W_A22, j], ws[W_B2, j], ws[W_RPATH, j] = G, Icp, kk, a22, b2, r_path
        ws[W_SLOW, j] = 1.0 if relay_open else 0.0
        ws[W_I, j], ws[W_VC, j] = lane[j, L_I], vc
        ws[W_SCALE, j] = scale
        if not switching:
            continue
        # center-aligned PWM: the fast low switch on for dl T/2 at each end, the high switch in
        # the middle, the timer's dead time at each edge; T/2 (the ADC sample) is a boundary
        dl = min(max(float(compare[j]) / par[P_COUNTS], 0.0), 1.0)
        td = par[P_TDEAD] if (dl > 0.0 and dl < 1.0) else 0.0
        t1 = dl * half
        t2 = T - t1
        b2_ = min(t1 + td, t2)
        b4 = min(t2 + td, T)
        g = int(gates[j])
        s_lo = (g & GATE_SLOW_LO) != 0
        s_hi = (g & GATE_SLOW_HI) != 0
        qb = 0 if (s_lo and not s_hi) else (1 if (s_hi and not s_lo) else -1)
        qa_low = 0 if (g & GATE_FAST_LO) != 0 else -1
        qa_high = 1 if (g & GATE_FAST_HI) != 0 else -1
        s0, c0 = lane[j, L_S0], lane[j, L_C0]
        for seg in range(7):
            if seg == 0:
                a, b, qa = 0.0, t1, qa_low
            elif seg == 1:
                a, b, qa = t1, min(b2_, half), -1
            elif seg == 2:
                a, b, qa = min(b2_, half), half, qa_high
            elif seg == 3:
                a, b, qa = half, max(b2_, half), -1
            elif seg == 4:
                a, b, qa = max(b2_, half), t2, qa_high
            elif seg == 5:
                a, b, qa = t2, b4, -1
            else:
                a, b, qa = b4, T, qa_low
            dt = max(b - a, 0.0)
            m_pos, m_neg = _m_pair(qa, qb)
            ws[W_DT + seg, j] = dt
            ws[W_VS + seg, j] = source_at(lane, harm, j, scale, a + 0.5 * dt, s0, c0) if dt > 0.0 else 0.0
            ws[W_MP + seg, j], ws[W_MN + seg, j] = m_pos, m_neg
        ws[W_VSH, j] = source_at(lane, harm, j, scale, half, s0, c0)


@jit
def _solve_segment(par, plans, ws, n, seg, kind, pieces, order):
    """Sub-interval ``seg`` of every lane: the exact step over all lanes at once, lanes it does
    not cover redone alone, then the sub-interval's share of the period's integrals."""
    Lt, C, rc = par[P_LT], par[P_C], par[P_ESR]
    inv_L, inv_C = 1.0 / Lt, 1.0 / C
    G, ICP, K_, A22, B2, RPATH, SLOW = ws[W_G], ws[W_ICP], ws[W_K], ws[W_A22], ws[W_B2], ws[W_RPATH], ws[W_SLOW]
    I, VC, X1, X2, M, MPREV = ws[W_I], ws[W_VC], ws[W_X1], ws[W_X2], ws[W_M], ws[W_MPREV]
    A11, A12, A21, B1 = ws[W_A11], ws[W_A12], ws[W_A21], ws[W_B1]
    V1, V2, Y1, Y2, H = ws[W_V1], ws[W_V2], ws[W_Y1], ws[W_Y2], ws[W_H]
    P11, P12, P21, P22 = ws[W_P11], ws[W_P12], ws[W_P21], ws[W_P22]
    Q, Q2, EIN, VB, IMAX, IMIN = ws[W_Q], ws[W_Q2], ws[W_EIN], ws[W_VB], ws[W_IMAX], ws[W_IMIN]
    DT, VS, MP, MN = ws[W_DT + seg], ws[W_VS + seg], ws[W_MP + seg], ws[W_MN + seg]
    # matrices for conduction in the current's direction (forced: switches both ways), and
    # the first term of the series
    for j in range(n):
        m = MP[j] if (MP[j] == MN[j] or I[j] > 0.0) else MN[j]
        a11, a12, a21, b1 = conduction(m, K_[j], rc, RPATH[j], VS[j], ICP[j], inv_L, inv_C)
        A11[j], A12[j], A21[j], B1[j], M[j] = a11, a12, a21, b1, m
        h = DT[j] * INV[pieces]
        H[j] = h
        P11[j], P12[j], P21[j], P22[j] = h * a11, h * a12, h * a21, h * A22[j]
        x1, x2 = I[j], VC[j]
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
    # sub-interval's share of the period's integrals (current near-linear inside it)
    for j in range(n):
        dt = DT[j]
        i0, vc0, i1, vc1 = I[j], VC[j], X1[j], X2[j]
        m = M[j]
        forced = MP[j] == MN[j]
        if dt > 0.0 and (SLOW[j] != 0.0 or (not forced and (i0 == 0.0 or (i0 > 0.0 and i1 < 0.0)
                                                              or (i0 < 0.0 and i1 > 0.0)))):
            relay = 1 if SLOW[j] != 0.0 else 0
            cc = (inv_L, inv_C, K_[j], rc, RPATH[j], A22[j], B2[j], G[j], ICP[j])
            i1, vc1, m = segment(i0, vc0, dt, MP[j], MN[j], VS[j], cc, plans[relay, kind, 0], plans[relay, kind, 1])
        if not dt > 0.0:
            m = MPREV[j]
        Q[j] += dt * (i0 + i1) * 0.5
        Q2[j] += dt * (i0 * i0 + i0 * i1 + i1 * i1) * THIRD
        EIN[j] += dt * VS[j] * (i0 + i1) * 0.5
        VB[j] += dt * (bus_k(m, i0, vc0, ICP[j], rc, K_[j]) + bus_k(m, i1, vc1, ICP[j], rc, K_[j])) * 0.5
        IMAX[j] = max(IMAX[j], i1)
        IMIN[j] = min(IMIN[j], i1)
        I[j], VC[j], MPREV[j] = i1, vc1, m


@jit
def _switching_period(par, plans, ws, n):
    """One switching period of every lane, sub-interval by sub-interval.  The exact solver
    runs over all lanes at once (loops the compiler vectorises) with the step plan of a
    closed limiter relay; a lane whose diode current starts at zero or reaches zero in the
    sub-interval, or whose relay is open, is then done again alone by ``segment``.  Either
    way a lane's numbers are its own."""
    rc = par[P_ESR]
    ICP, K_, I, VC, MPREV = ws[W_ICP], ws[W_K], ws[W_I], ws[W_VC], ws[W_MPREV]
    Q, Q2, EIN, VB, IMAX, IMIN = ws[W_Q], ws[W_Q2], ws[W_EIN], ws[W_VB], ws[W_IMAX], ws[W_IMIN]
    for j in range(n):
        ws[W_ISTART, j] = I[j]
        Q[j] = Q2[j] = EIN[j] = VB[j] = 0.0
        IMAX[j] = IMIN[j] = I[j]
        MPREV[j] = 0.0
    for seg in range(7):
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
        if seg == 2:  # the ADC sample at T/2
            for j in range(n):
                ws[W_IS, j] = I[j]
                ws[W_VBS, j] = bus_k(MPREV[j], I[j], VC[j], ICP[j], rc, K_[j])


@jit
def step_lanes(par, plans, lane, harm, seed, k, t, model, compare, gates, codes, out, ws):
    """Advance every lane by period ``k`` (starting at ``t`` s) with the given compare
    (timer counts) and gate masks; write the ADC codes sampled in it into ``codes`` (n, 3)
    and the period's records into ``out`` (n, len(FIELDS)); ``ws`` is scratch space from
    ``workspace(n)``."""
    n = lane.shape[0]
    T = par[P_T]
    switching = model == MODEL_SWITCHING
    _period_setup(par, lane, harm, t, compare, gates, ws, switching)
    if switching:
        _switching_period(par, plans, ws, n)
        f = 1.0 / T
        for j in range(n):
            vbus_avg = ws[W_VB, j] * f
            G, Icp = ws[W_G, j], ws[W_ICP, j]
            i_s = ws[W_IS, j]
            out[j, R_VS] = ws[W_VSH, j]
            # sensed line voltage: source less the drop of the period-average current on the
            # source impedance (the input filter's X capacitors carry the switching ripple)
            out[j, R_VTERM] = ws[W_VSH, j] - par[P_RSRC] * i_s - par[P_LSRC] * (ws[W_I, j] - ws[W_ISTART, j]) * f
            out[j, R_IAVG] = ws[W_Q, j] * f
            out[j, R_IMAX] = ws[W_IMAX, j]
            out[j, R_IMIN] = ws[W_IMIN, j]
            out[j, R_ISAMPLE] = i_s
            out[j, R_VBUS] = vbus_avg
            out[j, R_VBSAMPLE] = ws[W_VBS, j]
            out[j, R_EIN] = ws[W_EIN, j]
            out[j, R_EOUT] = T * (G * vbus_avg * vbus_avg + Icp * vbus_avg)
            out[j, R_ELOSS] = ws[W_RPATH, j] * ws[W_Q2, j]
            lane[j, L_I], lane[j, L_VC] = ws[W_I, j], ws[W_VC, j]
    else:
        for j in range(n):
            relay = 1 if ws[W_SLOW, j] != 0.0 else 0
            i, vc = period_averaged(par, plans, lane, harm, j, ws[W_SCALE, j], float(compare[j]), int(gates[j]),
                                    ws[W_G, j], ws[W_ICP, j], ws[W_RPATH, j], relay, out[j])
            lane[j, L_I], lane[j, L_VC] = i, vc
    for j in range(n):
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, out[j, R_VTERM])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, out[j, R_ISAMPLE])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, out[j, R_VBSAMPLE])
        advance_phase(lane, j, T)


@jit_inline
def small_sin_cos(x):
    """sin and cos of an angle of at most 0.05 rad by their series (to below 1e-17), larger
    ones by the library."""
    if abs(x) <= 0.05:
        x2 = x * x  # Horner with the reciprocals as constants: products, no division
        return (x * (1.0 - x2 * (1.0 / 6.0) * (1.0 - x2 * (1.0 / 20.0) * (1.0 - x2 * (1.0 / 42.0)))),
                1.0 - x2 * 0.5 * (1.0 - x2 * (1.0 / 12.0) * (1.0 - x2 * (1.0 / 30.0) * (1.0 - x2 * (1.0 / 56.0)))))
    return math.sin(x), math.cos(x)


@jit_inline
def advance_phase(lane, j, T):
    """The line phase one period on, kept in [0, 2 pi) (a frequency step keeps the wave
    continuous); its sine and cosine follow by rotation and are taken afresh from the library
    once a cycle, when the phase wraps, so rounding cannot build up."""
    x = TWO_PI * lane[j, L_FREQ] * T
    th = lane[j, L_THETA] + x
    if th >= TWO_PI or th < 0.0:
        while th >= TWO_PI:
            th -= TWO_PI
        while th < 0.0:
            th += TWO_PI
        lane[j, L_S0], lane[j, L_C0] = math.sin(th), math.cos(th)
    else:
        sx, cx = small_sin_cos(x)
        s0, c0 = lane[j, L_S0], lane[j, L_C0]
        lane[j, L_S0], lane[j, L_C0] = s0 * cx + c0 * sx, c0 * cx - s0 * sx
    lane[j, L_THETA] = th
