"""Totem-pole PFC power stage, batch of ``n`` scenarios in lockstep.

Circuit: grid source (``v_s``, ``R_src``, ``L_src``) -> boost inductor ``L`` (DCR)
-> fast-leg midpoint A; the slow-leg midpoint B returns to the other line
terminal.  With ``q_A``, ``q_B`` = 1 when a midpoint is tied to the bus plus rail
and 0 when tied to the minus rail, ``m = q_A - q_B`` and

    L_t di/dt = v_s - R_t i - m v_bus          (L_t = L + L_src, R_t = DCR + R_src + Rds_fast + Rds_slow)
    C dv_C/dt = m i - i_load,   v_bus = v_C + ESR (m i - i_load)

and the sensed line voltage is ``v_s`` less the source-impedance drop of the
period-average current (the input filter's X capacitors carry the ripple).  The
load is a conductance ``G`` plus a current ``I_cp`` (constant-power part,
``P/v_bus`` frozen over each period).  A conducting switch fixes its midpoint;
with neither switch of a leg on, the body diode (or diode) that the current
sign forward-biases does (``q_A = 1`` for ``i > 0``, ``0`` for ``i < 0``; the
slow leg the other way round).  When a diode current reaches zero the event
time is found (Newton on the exact solution) and the current stays at zero
until the inductor voltage forward-biases a path again: discontinuous
conduction.

One PWM period (center-aligned): fast low switch commanded on for ``dL T/2`` at
each end (``dL`` = compare/period), high switch in the middle, the timer's dead
time at each edge.  The ADC samples at ``T/2``.  Each sub-interval is linear and
solved exactly (``plant.linear``).  Diode forward drops are not modelled (a
resistive path only), stated here so nobody reads the efficiency as a loss model
of real devices.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linear import advance

GATE_FAST_LO, GATE_FAST_HI, GATE_SLOW_LO, GATE_SLOW_HI = 1, 2, 4, 8


@dataclass(frozen=True)
class StageParams:
    """Power-stage numbers (SI)."""

    inductance_H: float
    capacitance_F: float
    inductor_dcr_ohm: float
    capacitor_esr_ohm: float
    rds_on_fast_ohm: float
    rds_on_slow_ohm: float
    dead_time_s: float
    fsw_Hz: float
    period_counts: int
    source_resistance_ohm: float = 0.0
    source_inductance_H: float = 0.0
    inrush_resistance_ohm: float = 0.0  # series limiter, bypassed by a relay once the bus is charged
    bypass_close_frac: float = 0.95  # relay closes when the bus reaches this fraction of the line peak
    bypass_open_frac: float = 0.6  # and opens again below this fraction

    @property
    def period_s(self) -> float:
        return 1.0 / self.fsw_Hz

    @property
    def l_total_H(self) -> float:
        return self.inductance_H + self.source_inductance_H

    @property
    def r_total_ohm(self) -> float:
        return self.inductor_dcr_ohm + self.source_resistance_ohm + self.rds_on_fast_ohm + self.rds_on_slow_ohm


@dataclass
class PeriodResult:
    """What one period produced, arrays of shape (n,)."""

    i_sample_A: np.ndarray  # inductor current at the sample instant T/2
    vbus_sample_V: np.ndarray  # bus terminal voltage at T/2
    vterm_sample_V: np.ndarray  # line voltage at the converter terminals at T/2
    i_avg_A: np.ndarray  # period-average inductor (= line) current
    i_max_A: np.ndarray  # largest current in the period
    i_min_A: np.ndarray  # smallest current in the period
    vbus_avg_V: np.ndarray
    e_in_J: np.ndarray  # energy from the source
    e_out_J: np.ndarray  # energy into the load
    e_loss_J: np.ndarray  # resistive losses (path resistance and ESR)
    shoot_through: np.ndarray  # bool: both switches of a leg commanded on


class Stage:
    """State ``i`` (A) and ``vc`` (V, capacitor) for ``n`` scenarios."""

    def __init__(self, p: StageParams, n: int, i0_A=0.0, vc0_V=0.0, g_max_S: float = 1.0):
        """``g_max_S``: the largest load conductance the run will see (bounds the step size
        of the exact solver, fixed so that every lane's result is independent of the batch)."""
        self.p = p
        self.n = n
        L, C = p.l_total_H, p.capacitance_F
        # |A| per second in the scaled state (i sqrt(L), v sqrt(C)), where the matrix norm is
        # R/L + 1/sqrt(LC) + G/C: with the limiter relay closed, and with it open
        base = 1.0 / np.sqrt(L * C) + g_max_S / C + p.capacitor_esr_ohm / L
        self.rate = ((p.r_total_ohm / L + base), ((p.r_total_ohm + p.inrush_resistance_ohm) / L + base))
        self.bypassed = np.ones(n, dtype=bool)  # inrush limiter relay; start-up begins precharged
        self.r_path = np.full(n, p.r_total_ohm)
        self.i = np.full(n, float(i0_A)) if np.isscalar(i0_A) else np.array(i0_A, dtype=float)
        self.vc = np.full(n, float(vc0_V)) if np.isscalar(vc0_V) else np.array(vc0_V, dtype=float)

    def inrush_update(self, vline_pk_V) -> None:
        """The inrush limiter's relay (autonomous hardware, hysteretic on the bus against the
        nominal line peak): opens when the bus has collapsed, closes once it is charged."""
        p = self.p
        if p.inrush_resistance_ohm <= 0.0:
            return
        vpk = np.asarray(vline_pk_V, dtype=float)
        self.bypassed = np.where(self.vc >= p.bypass_close_frac * vpk, True,
                                 np.where(self.vc < p.bypass_open_frac * vpk, False, self.bypassed))
        self.r_path = p.r_total_ohm + np.where(self.bypassed, 0.0, p.inrush_resistance_ohm)

    # -- circuit pieces ----------------------------------------------------------------
    def _matrices(self, m, G, Icp, vs):
        p = self.p
        rc = p.capacitor_esr_ohm
        k = 1.0 / (1.0 + rc * G)
        L, C = p.l_total_H, p.capacitance_F
        a11 = -(self.r_path + k * rc * m * m) / L
        a12 = -m * k / L
        a21 = m * k / C
        a22 = -G * k / C
        b1 = (vs + m * k * rc * Icp) / L
        b2 = -k * Icp / C
        return a11, a12, a21, a22, b1, b2

    def vbus(self, m, i, vc, G, Icp):
        rc = self.p.capacitor_esr_ohm
        return (vc + rc * (m * i - Icp)) / (1.0 + rc * G)

    @staticmethod
    def m_of(qa_fix, qb_fix):
        """(m for i > 0, m for i < 0) with the midpoints fixed (0/1) or free (-1: diode)."""
        m_pos = np.where(qa_fix >= 0, qa_fix, 1) - np.where(qb_fix >= 0, qb_fix, 0)
        m_neg = np.where(qa_fix >= 0, qa_fix, 0) - np.where(qb_fix >= 0, qb_fix, 1)
        return m_pos, m_neg

    def _advance(self, a11, a12, a21, a22, b1, b2, i, vc, t, t_max):
        """``advance`` with a step plan fixed by the parameters and ``t_max`` (and by each lane's
        limiter relay), so that no lane's result depends on the others."""
        x = advance(a11, a12, a21, a22, b1, b2, i, vc, t, self.rate[0] * t_max)
        if self.bypassed.all():
            return x
        y = advance(a11, a12, a21, a22, b1, b2, i, vc, t, self.rate[1] * t_max)
        return np.where(self.bypassed, x[0], y[0]), np.where(self.bypassed, x[1], y[1])

    def _segment(self, dt, m_pos, m_neg, vs, G, Icp, t_max):
        """Advance every lane by ``dt`` (at most ``t_max``); ``m_pos``/``m_neg`` apply while the
        current is positive/negative (equal where switches conduct both ways)."""
        forced = m_pos == m_neg
        i, vc = self.i, self.vc
        remaining = np.array(dt, dtype=float)
        zero_mode = np.zeros(self.n, dtype=bool)
        m_used = np.zeros(self.n)
        for _ in range(3):
            active = remaining > 0.0
            if not active.any():
                break
            # conduction state at the start of what is left
            vb0 = self.vbus(0.0, 0.0, vc, G, Icp)
            start_pos = (i > 0.0) | ((i == 0.0) & ~forced & (vs - m_pos * vb0 > 0.0))
            start_neg = (i < 0.0) | ((i == 0.0) & ~forced & (vs - m_neg * vb0 < 0.0))
            m = np.where(forced, m_pos, np.where(start_pos, m_pos, np.where(start_neg, m_neg, 0)))
            zero_mode = ~forced & ~start_pos & ~start_neg
            a11, a12, a21, a22, b1, b2 = self._matrices(m, G, Icp, vs)
            # in the zero-current state the inductor carries nothing: only the capacitor moves
            a11 = np.where(zero_mode, 0.0, a11)
            a12 = np.where(zero_mode, 0.0, a12)
            a21 = np.where(zero_mode, 0.0, a21)
            b1 = np.where(zero_mode, 0.0, b1)
            t = np.where(active, remaining, 0.0)
            i1, vc1 = self._advance(a11, a12, a21, a22, b1, b2, i, vc, t, t_max)
            cross = active & ~forced & ~zero_mode & (np.sign(i1) != np.sign(i)) & (i != 0.0)
            m_used = np.where(active, m, m_used)
            if not cross.any():
                i, vc = np.where(active, i1, i), np.where(active, vc1, vc)
                remaining = np.zeros_like(remaining)
                break
            # diode current reaches zero inside the step: find when (Newton on the exact solution)
            tz = t * i / (i - np.where(cross, i1, i - 1.0))
            tz = np.where(cross, np.clip(tz, 0.0, t), 0.0)
            for _ in range(2):  # from the chord, Newton converges to rounding in two steps
                iz, vz = self._advance(a11, a12, a21, a22, b1, b2, i, vc, tz, t_max)
                di = a11 * iz + a12 * vz + b1
                tz = np.where(cross & (di != 0.0), np.clip(tz - iz / np.where(di == 0.0, 1.0, di), 0.0, t), tz)
            iz, vz = self._advance(a11, a12, a21, a22, b1, b2, i, vc, tz, t_max)
            done = active & ~cross
            i = np.where(done, i1, np.where(cross, 0.0, i))
            vc = np.where(done, vc1, np.where(cross, vz, vc))
            remaining = np.where(cross, np.maximum(remaining - tz, 0.0), 0.0)
        self.i, self.vc = i, vc
        return m_used

    # -- one PWM period ----------------------------------------------------------------
    def step_period(self, compare, gates, vs_of_t, G, Icp) -> PeriodResult:
        """Advance one period. ``vs_of_t(t)`` gives the source voltage (n,) at time t in
        the period (s from its start); ``compare`` in timer counts; ``gates`` bit mask."""
        p = self.p
        T = p.period_s
        gates = np.asarray(gates, dtype=np.int64)
        dl = np.clip(np.asarray(compare, dtype=float) / p.period_counts, 0.0, 1.0)
        td = np.where((dl > 0.0) & (dl < 1.0), p.dead_time_s, 0.0)
        t1 = dl * T / 2.0
        t2 = T - t1
        b2 = np.minimum(t1 + td, t2)
        b4 = np.minimum(t2 + td, T)
        half = T / 2.0
        lo_on = (gates & GATE_FAST_LO) != 0
        hi_on = (gates & GATE_FAST_HI) != 0
        s_lo = (gates & GATE_SLOW_LO) != 0
        s_hi = (gates & GATE_SLOW_HI) != 0
        shoot = s_lo & s_hi
        qb = np.where(s_lo & ~s_hi, 0, np.where(s_hi & ~s_lo, 1, -1))
        free = np.full(self.n, -1)
        qa_low = np.where(lo_on, 0, -1)
        qa_high = np.where(hi_on, 1, -1)
        # (start, end, qa) of each sub-interval; the sample instant T/2 is a boundary
        tdm = p.dead_time_s
        segs = [  # (start, end, fast midpoint, longest possible duration)
            (0.0, t1, qa_low, half),
            (t1, np.minimum(b2, half), free, tdm),
            (np.minimum(b2, half), half, qa_high, half),
            (half, np.maximum(b2, half), free, tdm),
            (np.maximum(b2, half), t2, qa_high, half),
            (t2, b4, free, tdm),
            (b4, T, qa_low, half),
        ]
        n = self.n
        i_start = self.i.copy()
        q_int = np.zeros(n)
        q2_int = np.zeros(n)
        e_in = np.zeros(n)
        vb_int = np.zeros(n)
        imax = i_start.copy()
        imin = i_start.copy()
        sample = None
        m_prev = np.zeros(n)
        for k, (a, b, qa, t_max) in enumerate(segs):
            a = np.broadcast_to(np.asarray(a, dtype=float), (n,))
            dt = np.maximum(np.asarray(b, dtype=float) - a, 0.0)
            if np.any(dt > 0.0):
                vs = vs_of_t(a + dt / 2.0)
                i0, vc0 = self.i, self.vc
                m = np.where(dt > 0.0, self._segment(dt, *self.m_of(qa, qb), vs, G, Icp, t_max), m_prev)
                m_prev = m
                i1 = self.i
                # current is piecewise near-linear inside a sub-interval: exact integrals for a line
                q_int += dt * (i0 + i1) / 2.0
                q2_int += dt * (i0 * i0 + i0 * i1 + i1 * i1) / 3.0
                e_in += dt * vs * (i0 + i1) / 2.0
                vb_int += dt * (self.vbus(m, i0, vc0, G, Icp) + self.vbus(m, i1, self.vc, G, Icp)) / 2.0
                imax = np.maximum(imax, i1)
                imin = np.minimum(imin, i1)
            else:
                m = m_prev
            if k == 2:
                vs_half = vs_of_t(np.full(n, half))
                vb_half = self.vbus(m, self.i, self.vc, G, Icp)
                sample = [self.i.copy(), vb_half, vs_half]
        # sensed line voltage: source minus the drop on the source impedance from the period-average
        # current (the input filter's X capacitors carry the switching ripple)
        sample[2] = sample[2] - p.source_resistance_ohm * sample[0] - p.source_inductance_H * (self.i - i_start) / T
        vbus_avg = vb_int / T
        e_out = T * (G * vbus_avg**2 + Icp * vbus_avg)
        e_loss = self.r_path * q2_int
        return PeriodResult(sample[0], sample[1], sample[2], q_int / T, imax, imin, vbus_avg, e_in, e_out, e_loss,
                            shoot)

    def step_averaged(self, compare, gates, vs_of_t, G, Icp) -> PeriodResult:
        """Averaged model: one exact linear update per period with the period-average
        midpoint positions, separately for positive and negative current, so that a
        path left to diodes for part of the period blocks reversal (a simple account of
        discontinuous conduction).  For long runs where the switching ripple does not
        matter; the sample is the period average."""
        p = self.p
        T = p.period_s
        n = self.n
        gates = np.asarray(gates, dtype=np.int64)
        dl = np.clip(np.asarray(compare, dtype=float) / p.period_counts, 0.0, 1.0)
        td = np.where((dl > 0.0) & (dl < 1.0), p.dead_time_s, 0.0)
        f_lo = dl
        f_dead = np.minimum(2.0 * td / T, 1.0 - dl)
        f_hi = 1.0 - f_lo - f_dead
        lo_on = (gates & GATE_FAST_LO) != 0
        hi_on = (gates & GATE_FAST_HI) != 0
        s_lo = (gates & GATE_SLOW_LO) != 0
        s_hi = (gates & GATE_SLOW_HI) != 0
        qb = np.where(s_lo & ~s_hi, 0, np.where(s_hi & ~s_lo, 1, -1))
        qb_pos = np.where(qb >= 0, qb, 0)
        qb_neg = np.where(qb >= 0, qb, 1)
        # fraction of the period the fast midpoint is on the plus rail, by current sign
        qa_pos = 1.0 - f_lo * lo_on
        qa_neg = f_hi * hi_on
        m_pos, m_neg = qa_pos - qb_pos, qa_neg - qb_neg
        vs = vs_of_t(np.full(n, T / 2.0))
        i0, vc0 = self.i.copy(), self.vc.copy()
        m = self._segment(np.full(n, T), m_pos, m_neg, vs, G, Icp, T)
        i1 = self.i
        vb = (self.vbus(m, i0, vc0, G, Icp) + self.vbus(m, i1, self.vc, G, Icp)) / 2.0
        iavg = (i0 + i1) / 2.0
        q2 = T * (i0 * i0 + i0 * i1 + i1 * i1) / 3.0
        return PeriodResult(iavg, vb, vs - p.source_resistance_ohm * iavg - p.source_inductance_H * (i1 - i0) / T,
                            iavg, np.maximum(i0, i1), np.minimum(i0, i1), vb, T * vs * iavg,
                            T * (G * vb**2 + Icp * vb), self.r_path * q2, s_lo & s_hi)
