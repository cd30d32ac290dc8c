"""The plant's arithmetic, one lane at a time, compiled with numba when it is installed.

Everything here is plain Python on floats and numpy arrays: with numba the functions are
compiled to machine code (``@jit``), without it they run as they are (same results, far
slower).  One lane's numbers never depend on another lane's, so a scenario gives the same
bits alone or inside any batch.

Circuit and notation as in ``plant.stage``: state ``i`` (A, inductor = line current) and
``vc`` (V, capacitor); ``m = q_A - q_B`` the midpoint difference (fractional in the
averaged model); load conductance ``G`` (S) and constant-power current ``Icp`` (A).

Each linear piece ``x' = A x + b`` is advanced exactly by the series of the matrix
exponential, ``x(t) = x0 + t sum_{j>=1} (tA)^(j-1)/j! (A x0 + b)``, summed by Horner to an
order (and in as many pieces) as ``plant.linear.plan`` sets from a bound on ``|A| t``, so the
truncation error stays below 1e-16 relative.
"""
from __future__ import annotations

import math

import numpy as np

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

# rows of the per-lane float state (``lane`` array, shape (LANE_ROWS, n))
(L_I, L_VC, L_BYPASSED, L_CONNECTED, L_THETA, L_VRMS, L_FREQ, L_DC, L_DIP_END, L_DIP_LEVEL, L_POWER, L_CP,
 L_GAIN0, L_GAIN1, L_GAIN2, L_OFF0, L_OFF1, L_OFF2, L_NOISE0, L_NOISE1, L_NOISE2) = range(21)
LANE_ROWS = 21

# entries of the parameter vector (``par``)
(P_LT, P_C, P_ESR, P_RTOT, P_RINRUSH, P_TDEAD, P_T, P_COUNTS, P_RSRC, P_LSRC, P_CLOSE, P_OPEN, P_VOUT, P_CONNECT,
 P_UVLO, P_FULL, P_VAC_PER, P_VAC_OFF, P_IL_PER, P_IL_OFF, P_VBUS_PER) = range(21)
PAR_ROWS = 21

# plant records per period (rows of ``rec[k]``), in this order
FIELDS = ("t_s", "vs_V", "vterm_V", "i_avg_A", "i_max_A", "i_min_A", "i_sample_A", "vbus_V", "vbus_sample_V",
          "compare", "gates", "e_in_J", "e_out_J", "e_loss_J", "shoot_through")
(R_T, R_VS, R_VTERM, R_IAVG, R_IMAX, R_IMIN, R_ISAMPLE, R_VBUS, R_VBSAMPLE, R_COMPARE, R_GATES, R_EIN, R_EOUT,
 R_ELOSS, R_SHOOT) = range(len(FIELDS))

GATE_FAST_LO, GATE_FAST_HI, GATE_SLOW_LO, GATE_SLOW_HI = 1, 2, 4, 8
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
            a11 = -(r_path + k * rc * m * m) * inv_L
            a12 = -m * k * inv_L
            a21 = m * k * inv_C
            b1 = (vs + m * k * rc * Icp) * inv_L
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
@jit
def source(lane, harm, j, scale, t):
    """Source voltage (V) of lane ``j`` at ``t`` s after the present period start;
    ``harm[h] = (order, amplitude fraction, phase rad)`` rows of shape (n,)."""
    th = lane[L_THETA, j]
    return source_at(lane, harm, j, scale, t, math.sin(th), math.cos(th))


@jit_inline
def source_at(lane, harm, j, scale, t, s0, c0):
    """``source`` with ``s0, c0`` = sin, cos of the phase at the period start: the
    fundamental by angle addition, with sin and cos of the small advance ``x = 2 pi f t``
    from their series (to below 1e-18 for |x| <= 0.05 rad; larger ``x`` by the library)."""
    x = TWO_PI * lane[L_FREQ, j] * t
    if abs(x) <= 0.05:
        x2 = x * x
        sx = x * (1.0 - x2 / 6.0 * (1.0 - x2 / 20.0 * (1.0 - x2 / 42.0)))
        cx = 1.0 - x2 / 2.0 * (1.0 - x2 / 12.0 * (1.0 - x2 / 30.0 * (1.0 - x2 / 56.0)))
    else:
        sx, cx = math.sin(x), math.cos(x)
    wave = s0 * cx + c0 * sx
    if harm.shape[0]:
        th = lane[L_THETA, j] + x
        for h in range(harm.shape[0]):
            wave = wave + harm[h, 1, j] * math.sin(harm[h, 0, j] * th + harm[h, 2, j])
    return SQRT2 * lane[L_VRMS, j] * scale * wave + lane[L_DC, j]


# -- one PWM period of one lane ------------------------------------------------------------
@jit_inline
def _m_pair(qa, qb):
    """(m for i > 0, m for i < 0) with the midpoints fixed (0/1) or free (-1: diode)."""
    m_pos = (qa if qa >= 0 else 1) - (qb if qb >= 0 else 0)
    m_neg = (qa if qa >= 0 else 0) - (qb if qb >= 0 else 1)
    return float(m_pos), float(m_neg)


@jit
def period_switching(par, plans, lane, harm, j, scale, compare, gates, G, Icp, r_path, relay, out):
    """One switching period of lane ``j``: seven sub-intervals (center-aligned PWM, dead
    time at each edge), each solved exactly; writes the period's figures into ``out``
    (rows R_*) and returns the new (i, vc)."""
    T, Lt, C, rc = par[P_T], par[P_LT], par[P_C], par[P_ESR]
    tdm = par[P_TDEAD]
    dl = min(max(compare / par[P_COUNTS], 0.0), 1.0)
    td = tdm if (dl > 0.0 and dl < 1.0) else 0.0
    half = T / 2.0
    t1 = dl * T / 2.0
    t2 = T - t1
    b2 = min(t1 + td, t2)
    b4 = min(t2 + td, T)
    lo_on = (gates & GATE_FAST_LO) != 0
    hi_on = (gates & GATE_FAST_HI) != 0
    s_lo = (gates & GATE_SLOW_LO) != 0
    s_hi = (gates & GATE_SLOW_HI) != 0
    qb = 0 if (s_lo and not s_hi) else (1 if (s_hi and not s_lo) else -1)
    qa_low = 0 if lo_on else -1
    qa_high = 1 if hi_on else -1
    i, vc = lane[L_I, j], lane[L_VC, j]
    i_start = i
    s0, c0 = math.sin(lane[L_THETA, j]), math.cos(lane[L_THETA, j])
    cc = circuit(Lt, C, rc, r_path, G, Icp)
    q_int = q2_int = e_in = vb_int = 0.0
    imax = imin = i
    m_prev = 0.0
    i_s = vb_s = vs_s = 0.0
    for s in range(7):
        # (start, end, fast midpoint, longest duration) of sub-interval s; T/2 is a boundary
        if s == 0:
            a, b, qa, kind = 0.0, t1, qa_low, PLAN_HALF
        elif s == 1:
            a, b, qa, kind = t1, min(b2, half), -1, PLAN_DEAD
        elif s == 2:
            a, b, qa, kind = min(b2, half), half, qa_high, PLAN_HALF
        elif s == 3:
            a, b, qa, kind = half, max(b2, half), -1, PLAN_DEAD
        elif s == 4:
            a, b, qa, kind = max(b2, half), t2, qa_high, PLAN_HALF
        elif s == 5:
            a, b, qa, kind = t2, b4, -1, PLAN_DEAD
        else:
            a, b, qa, kind = b4, T, qa_low, PLAN_HALF
        dt = max(b - a, 0.0)
        if dt > 0.0:
            vs = source_at(lane, harm, j, scale, a + dt / 2.0, s0, c0)
            m_pos, m_neg = _m_pair(qa, qb)
            i0, vc0 = i, vc
            i, vc, m = segment(i, vc, dt, m_pos, m_neg, vs, cc, plans[relay, kind, 0], plans[relay, kind, 1])
            m_prev = m
            # current is near-linear inside a sub-interval: exact integrals for a line
            q_int += dt * (i0 + i) / 2.0
            q2_int += dt * (i0 * i0 + i0 * i + i * i) / 3.0
            e_in += dt * vs * (i0 + i) / 2.0
            vb_int += dt * (vbus_of(m, i0, vc0, G, Icp, rc) + vbus_of(m, i, vc, G, Icp, rc)) / 2.0
            imax = max(imax, i)
            imin = min(imin, i)
        else:
            m = m_prev
        if s == 2:
            vs_s = source_at(lane, harm, j, scale, half, s0, c0)
            vb_s = vbus_of(m, i, vc, G, Icp, rc)
            i_s = i
    vbus_avg = vb_int / T
    out[R_VS] = vs_s
    # sensed line voltage: source less the drop of the period-average current on the source
    # impedance (the input filter's X capacitors carry the switching ripple)
    out[R_VTERM] = vs_s - par[P_RSRC] * i_s - par[P_LSRC] * (i - i_start) / T
    out[R_IAVG] = q_int / T
    out[R_IMAX] = imax
    out[R_IMIN] = imin
    out[R_ISAMPLE] = i_s
    out[R_VBUS] = vbus_avg
    out[R_VBSAMPLE] = vb_s
    out[R_EIN] = e_in
    out[R_EOUT] = T * (G * vbus_avg**2 + Icp * vbus_avg)
    out[R_ELOSS] = r_path * q2_int
    out[R_SHOOT] = 1.0 if (s_lo and s_hi) else 0.0
    return i, vc


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
    vs = source(lane, harm, j, scale, T / 2.0)
    i0, vc0 = lane[L_I, j], lane[L_VC, j]
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
    out[R_SHOOT] = 1.0 if (s_lo and s_hi) else 0.0
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
        raw = par[P_VAC_OFF] + x * (1.0 + lane[L_GAIN0, j]) / par[P_VAC_PER]
    elif ch == 1:
        raw = par[P_IL_OFF] + x * (1.0 + lane[L_GAIN1, j]) / par[P_IL_PER]
    else:
        raw = x * (1.0 + lane[L_GAIN2, j]) / par[P_VBUS_PER]
    raw = raw + lane[L_OFF0 + ch, j]
    z = lane[L_NOISE0 + ch, j]
    if z != 0.0:
        raw = raw + z * gauss(seed[j], k, ch)
    return np.uint16(min(max(np.rint(raw), 0.0), par[P_FULL]))


@jit
def adc_lanes(par, lane, seed, k, vac, il, vbus, codes):
    """Conversion ``k`` of every lane: ``codes[j] = (vac, il, vbus)`` codes of lane ``j``."""
    for j in range(lane.shape[1]):
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, vac[j])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, il[j])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, vbus[j])


# -- one period of every lane ----------------------------------------------------------------
@jit
def step_lanes(par, plans, lane, harm, seed, k, t, model, compare, gates, codes, out):
    """Advance every lane by period ``k`` (starting at ``t`` s) with the given compare
    (timer counts) and gate masks; write the ADC codes sampled in it into ``codes`` (n, 3)
    and the period's records into ``out`` (len(FIELDS), n)."""
    n = lane.shape[1]
    T = par[P_T]
    for j in range(n):
        scale = lane[L_DIP_LEVEL, j] if t < lane[L_DIP_END, j] else 1.0
        vc = lane[L_VC, j]
        # inrush limiter relay: autonomous hardware, hysteretic on the bus against the line peak
        if par[P_RINRUSH] > 0.0:
            vpk = SQRT2 * lane[L_VRMS, j]
            if vc >= par[P_CLOSE] * vpk:
                lane[L_BYPASSED, j] = 1.0
            elif vc < par[P_OPEN] * vpk:
                lane[L_BYPASSED, j] = 0.0
        relay = 0 if lane[L_BYPASSED, j] != 0.0 else 1
        r_path = par[P_RTOT] + (0.0 if relay == 0 else par[P_RINRUSH])
        # load: connects at power-good, drops out below its UVLO (the bus now: no current term)
        if vc >= par[P_CONNECT]:
            lane[L_CONNECTED, j] = 1.0
        elif vc < par[P_UVLO]:
            lane[L_CONNECTED, j] = 0.0
        G = Icp = 0.0
        if lane[L_CONNECTED, j] != 0.0:
            if lane[L_CP, j] != 0.0:
                Icp = lane[L_POWER, j] / max(vc, par[P_UVLO])
            else:
                G = lane[L_POWER, j] / par[P_VOUT] ** 2
        o = out[:, j]
        cmp_ = float(compare[j])
        g = int(gates[j])
        if model == MODEL_SWITCHING:
            i, vc = period_switching(par, plans, lane, harm, j, scale, cmp_, g, G, Icp, r_path, relay, o)
        else:
            i, vc = period_averaged(par, plans, lane, harm, j, scale, cmp_, g, G, Icp, r_path, relay, o)
        lane[L_I, j] = i
        lane[L_VC, j] = vc
        o[R_T] = t
        o[R_COMPARE] = cmp_
        o[R_GATES] = g
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, o[R_VTERM])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, o[R_ISAMPLE])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, o[R_VBSAMPLE])
        th = lane[L_THETA, j] + TWO_PI * lane[L_FREQ, j] * T
        while th >= TWO_PI:  # kept in [0, 2 pi): a frequency step keeps the wave continuous
            th -= TWO_PI
        while th < 0.0:
            th += TWO_PI
        lane[L_THETA, j] = th
