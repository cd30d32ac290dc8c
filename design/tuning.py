"""PI gains of the two loops from target crossover and phase margin, placed and checked on
the exact sampled loops the firmware and the plant form.

Averaged plants (Erickson & Maksimovic, Fundamentals of Power Electronics, averaged switch
modelling chapters): current loop duty -> inductor current ``K_i/s``, ``K_i = Vo/L`` (from
``L di/dt = v - (1 - d) Vo``; with an input filter the circuit of ``CurrentCircuit``, sampled
exactly, ``current_plant``); voltage loop input power command -> bus voltage ``K_v/s``,
``K_v = eta/(C Vo)`` (energy balance ``C Vo dv/dt = eta P_cmd - P_load``, constant-power load,
the least damped case).

Timing (the contract's, ``design.contract.TIMINGS[carrier]``, ``[control] carrier``; the
plant applies the same). Centre-aligned PWM: the main switch on for ``d T/2`` at each end of
the period, the ADC sampling at mid-period (the period's average current in CCM), the compare
computed from that sample taking effect at the next period start. Between two samples lie
the second half of the period before (duty ``d[k-1]``) and the first half of the next one
(``d[k]``), so the sampled current obeys ``i[k+1] = i[k] + (K_i T/2) (d[k] + d[k-1])``:

    P_i(z) = (K_i T / 2) (z + 1) / (z (z - 1))

(the sample-and-hold and the half-period computation delay are in it; no free delay figure).
Edge-aligned PWM: the low switch on for ``d T`` from the period start, the ADC at half that
on-time (the middle of a ramp: the period's average in CCM). The sample then sits after the
start by ``d T/2``, on a slope of ``|v|/L`` (positive half, the low switch the main one) or
``(V_o - |v|)/L`` (negative half): ``s[k] = i_start[k] + a d[k]`` with ``a = a' K_i T``,
``a' = |v|/(2 V_o)`` or ``(V_o - |v|)/(2 V_o)``, between 0 and 1/2, and ``i_start[k+1] =
i_start[k] + K_i T d[k]``:

    P_i(z) = K_i T ((1 - a') + a' z) / (z (z - 1))

which is the centre-aligned plant at ``a' = 1/2`` and ``K_i T/(z (z - 1))`` at ``a' = 0`` (a
main switch with no on-time before the sample: a whole period's delay). ``a' = 0`` has the
least phase and the most gain at every frequency up to Nyquist (``|1 - a' + a' e^{jwT}| <= 1``,
its phase lead ``>= 0``), so the edge-aligned loop is designed and its margins reported there:
the worst point of the line cycle (the crossing in the positive half, the peak region at a
high line in the negative half).
The voltage loop runs at the end of each of ``BUS_BLOCKS`` blocks of a half line cycle
(``tv = Th/BUS_BLOCKS``) on the mean of the last ``BUS_BLOCKS`` block means (a sliding half
cycle), its command held over the next block: the bus at block ends ``v[n+1] = v[n] + K_v tv
p[n]``, a block's mean ``v[n] + K_v tv p[n]/2``, the window the sum of ``BUS_BLOCKS`` of them:

    P_v(z) = K_v tv (z + 1) (z^7 + ... + 1) / (2 BUS_BLOCKS z^BUS_BLOCKS (z - 1))

(the sliding mean's magnitude and delay both in it). Both PIs are discretised by backward
Euler, ``C(z) = Kp + Ki T z/(z - 1)``, and placed exactly: ``C(e^{jwT}) P(e^{jwT})`` has
magnitude 1 and phase ``-180 deg + PM`` at the asked crossover. The margins reported are
then read off the same loop on a dense grid up to Nyquist (computed, not assumed);
``tests/test_tuning.py`` recomputes them with python-control from transfer functions it
builds itself.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np

from .config import Config, ConfigError
from .contract import timing
from .derive import Resolved, ff_step
from .filter import expm
from .filter import system as filter_system

BUS_BLOCKS = 8  # blocks of the sliding half-cycle bus average (a power of two)


@dataclass(frozen=True)
class LoopDesign:
    """One PI loop: gains, the discrete step, the target and the achieved figures."""

    name: str
    kp: float  # loop-specific units, see ``units``
    ki: float  # kp units per second
    ts_s: float  # PI update period
    plant_gain: float  # K of the averaged plant K/s
    plant_num: tuple[float, ...]  # sampled plant P(z), numerator in descending powers of z
    plant_den: tuple[float, ...]  # ... and its denominator
    target_crossover_Hz: float
    target_phase_margin_deg: float
    crossover_Hz: float
    phase_margin_deg: float
    gain_margin_dB: float
    units: str
    # the sensed line's own paths (current loop with an input filter): the duty to sampled
    # line-voltage plant over ``plant_den`` (empty: none), the current reference's gain on
    # |v| at the design point (A/V), the feedforward low-pass's step and the bus (V)
    line_num: tuple[float, ...] = ()
    ref_gain_A_per_V: float = 0.0
    ff_k: float = 1.0
    vout_V: float = 1.0

    @property
    def ki_ts(self) -> float:
        """Integrator increment per update and unit error (Ki T)."""
        return self.ki * self.ts_s

    def as_dict(self) -> dict:
        d = asdict(self)
        d["ki_ts"] = self.ki_ts
        return d

    def plant(self, f_Hz: np.ndarray | float) -> np.ndarray:
        """The sampled plant P(exp(jwT)) at frequencies ``f_Hz``."""
        z = np.exp(2j * np.pi * np.asarray(f_Hz, dtype=float) * self.ts_s)
        return np.polyval(self.plant_num, z) / np.polyval(self.plant_den, z)

    def line_paths(self, f_Hz: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """``(P_v, F)`` at ``f_Hz``: the duty to sampled |v| plant and the feedforward's
        low-pass ``F(z) = K z/(z - (1 - K))`` (``P_v`` 0 without the paths)."""
        z = np.exp(2j * np.pi * np.asarray(f_Hz, dtype=float) * self.ts_s)
        if not self.line_num:
            return np.zeros_like(z), np.ones_like(z)
        pv = np.polyval(self.line_num, z) / np.polyval(self.plant_den, z)
        return pv, self.ff_k * z / (z - (1.0 - self.ff_k))

    def loop_gain(self, f_Hz: np.ndarray) -> np.ndarray:
        """Open-loop gain at frequencies ``f_Hz``, the loop broken at its feedback sample:
        ``C P`` with ``C(z)`` the PI and ``P(z)`` the sampled plant; with the line's paths
        (module docstring) ``C P/(1 + F P_v (1/V_o - C g))``."""
        z = np.exp(2j * np.pi * np.asarray(f_Hz, dtype=float) * self.ts_s)
        pi = self.kp + self.ki * self.ts_s * z / (z - 1.0)
        pv, ff = self.line_paths(f_Hz)
        return (
            pi
            * self.plant(f_Hz)
            / (1.0 + (ff * pv) * (1.0 / self.vout_V - pi * self.ref_gain_A_per_V))
        )


def _pi_for(loop: LoopDesign, fc: float, pm_deg: float) -> tuple[float, float]:
    """(kp, ki) placing ``loop.loop_gain`` at magnitude 1 and phase -180 + pm at ``fc``: the
    PI's value ``C_t`` there solves ``T = C P/(1 + F P_v (1/V_o - C g))`` for the target ``T``
    (``C_t = T/P`` without the line's paths), then ``kp + ki q = C_t`` with ``q = T z/(z -
    1)``, real and imaginary parts."""
    ts, name = loop.ts_s, loop.name
    z = complex(np.exp(2j * math.pi * fc * ts))
    p = complex(loop.plant(fc))
    pv, ff = (complex(x) for x in loop.line_paths(fc))
    tt = complex(np.exp(1j * math.radians(pm_deg - 180.0)))
    ct = tt * (1.0 + ff * pv / loop.vout_V) / (p + tt * ff * pv * loop.ref_gain_A_per_V)
    p = tt / ct  # the plant the PI sees there, its own path folded in
    q = ts * z / (z - 1.0)
    ki = ct.imag / q.imag
    kp = ct.real - ki * q.real
    if kp <= 0.0 or ki <= 0.0:
        # the PI's phase lies between arg q (pure integral) and 0 (pure proportional)
        best = 180.0 + math.degrees(cmath_phase(p))
        raise ConfigError(
            f"[control] {name}: a phase margin of {pm_deg:g} deg at {fc:g} Hz is not reachable "
            f"with the sampled plant's {-math.degrees(cmath_phase(p)):.1f} deg lag there; at "
            f"most {best - 0.5:.1f} deg, or lower the bandwidth"
        )
    return kp, ki


def cmath_phase(c: complex) -> float:
    return math.atan2(c.imag, c.real)


def _grid(loop: LoopDesign) -> tuple[np.ndarray, np.ndarray]:
    """A dense log grid from three decades under the target crossover to Nyquist, and the
    loop gain on it."""
    nyq = 0.5 / loop.ts_s
    f = np.logspace(math.log10(loop.target_crossover_Hz) - 3, math.log10(nyq * 0.999), 20000)
    return f, loop.loop_gain(f)


def phase_crossover_Hz(loop: LoopDesign) -> float | None:
    """Where the loop's phase first reaches -180 deg above its crossover (Hz), None below
    Nyquist (the phase read as ``_margins`` reads it)."""
    return _crossings(loop)[2]


def _margins(loop: LoopDesign) -> tuple[float, float, float]:
    """(crossover Hz, phase margin deg, gain margin dB): ``_crossings`` without the phase
    crossing's frequency."""
    fc, pm, _, gm = _crossings(loop)
    return fc, pm, gm


def _crossings(loop: LoopDesign) -> tuple[float, float, float | None, float]:
    """(crossover Hz, phase margin deg, -180 deg crossing Hz or None, gain margin dB) on the
    dense grid: the first fall of the gain through 1, the phase there (wrapped: the
    feedforward's path cancels the plant's gain at DC, so a phase unwrapped from the grid's
    bottom can sit a turn off), and the first phase crossing of -180 deg above the crossover,
    the phase unwrapped from the crossover up, with the gain there (inf if none)."""
    f, g = _grid(loop)
    mag = np.abs(g)
    i = np.nonzero((mag[:-1] >= 1.0) & (mag[1:] < 1.0))[0]
    if len(i) == 0:
        raise ConfigError(
            f"[control] {loop.name}: the loop gain never crosses 1 below Nyquist; check the "
            "bandwidth"
        )
    k = i[0]
    t = (0.0 - math.log(mag[k])) / (math.log(mag[k + 1]) - math.log(mag[k]))
    fc = math.exp(math.log(f[k]) + t * (math.log(f[k + 1]) - math.log(f[k])))
    ph = np.unwrap(np.angle(g[k:]))
    pm = 180.0 + math.degrees(ph[0] + t * (ph[1] - ph[0]))
    pm = (pm + 180.0) % 360.0 - 180.0
    j = np.nonzero((ph[:-1] > -np.pi) & (ph[1:] <= -np.pi))[0]
    if len(j) == 0:
        return fc, pm, None, math.inf
    return fc, pm, float(f[k + j[0]]), -20.0 * math.log10(mag[k + j[0]])


def _with_margins(loop: LoopDesign) -> LoopDesign:
    """``loop`` with its crossover and margins computed afresh (``_margins``)."""
    fc, pm, gm = _margins(loop)
    return replace(loop, crossover_Hz=fc, phase_margin_deg=pm, gain_margin_dB=gm)


def _design(
    name: str,
    k_plant: float,
    num: np.ndarray,
    den: np.ndarray,
    fc: float,
    pm: float,
    ts: float,
    units: str,
    **line: Any,
) -> LoopDesign:
    nums, dens = tuple(float(x) for x in num), tuple(float(x) for x in den)
    nan = math.nan
    probe = LoopDesign(
        name, 0.0, 0.0, ts, k_plant, nums, dens, fc, pm, nan, nan, nan, units, **line
    )
    kp, ki = _pi_for(probe, fc, pm)
    return _with_margins(replace(probe, kp=kp, ki=ki))


def with_plant(
    loop: LoopDesign, num: np.ndarray, den: np.ndarray, line_num: np.ndarray | None = None
) -> LoopDesign:
    """``loop``'s PI on another sampled plant (for example the edge-aligned current plant at
    another point of the line cycle; ``line_num`` its line path over the same ``den``, kept
    when None), its crossover and margins computed afresh."""
    nums, dens = tuple(float(x) for x in num), tuple(float(x) for x in den)
    lines = loop.line_num if line_num is None else tuple(float(x) for x in line_num)
    return _with_margins(replace(loop, plant_num=nums, plant_den=dens, line_num=lines))


def ref_gain_A_per_V(cfg: Config, p_load_W: float, vrms_V: float) -> float:
    """The current reference's gain on |v| (A/V) at a load and a line: ``P_in/V_rms^2``."""
    return p_load_W / cfg.spec.efficiency / vrms_V**2


def at_ref_gain(loop: LoopDesign, g_A_per_V: float) -> LoopDesign:
    """``loop`` (a current loop) with its reference's path at gain ``g_A_per_V`` (an operating
    point's, ``ref_gain_A_per_V``), its crossover and margins computed afresh."""
    return _with_margins(replace(loop, ref_gain_A_per_V=g_A_per_V))


@dataclass(frozen=True)
class CurrentCircuit:
    """What the duty drives (H, ohm, F): the boost inductor, and between it and the grid (a
    short for the loop) the input filter of ``design.filter.system``; with ``c_x_F`` 0 there
    is none and the grid's inductance stands in series with the boost inductor.
    ``duty`` is the main switch's duty at which the centre-aligned carrier's edges sit (the
    line cycle's mean at the nominal line; only the filter's states notice where they sit)."""

    inductance_H: float
    l_src_H: float
    r_src_ohm: float
    l_dm_H: float
    r_dm_ohm: float
    r_d_ohm: float
    c_x_F: float
    duty: float

    @classmethod
    def inductor(cls, inductance_H: float) -> CurrentCircuit:
        """An inductor alone between a stiff source and the bridge."""
        return cls(inductance_H, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.5)

    @property
    def has_filter(self) -> bool:
        return self.c_x_F > 0.0

    def states(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(A, b, c)``: ``x' = A x + b u``, ``i_L = c x``, ``u`` the volts the duty takes off
        the bridge (``V_o`` per unit duty). With a filter ``x = (i_s, i_m, v_x, i_L)``,
        ``L di_L/dt = v_x + u`` and the X capacitor feeding ``i_L``; without one ``x = (i_L)``,
        the boost and grid inductances in series (resistances left out: their pole, R/L, sits
        two decades under the crossover)."""
        if not self.has_filter:
            return (
                np.zeros((1, 1)),
                np.array([1.0 / (self.inductance_H + self.l_src_H)]),
                np.array([1.0]),
            )
        af, _, bi = filter_system(
            self.l_src_H, self.r_src_ohm, self.l_dm_H, self.r_dm_ohm, self.r_d_ohm, self.c_x_F
        )
        a = np.zeros((4, 4))
        a[:3, :3], a[:3, 3] = af, bi
        a[3, 2] = 1.0 / self.inductance_H
        b = np.array([0.0, 0.0, 0.0, 1.0 / self.inductance_H])
        return a, b, np.array([0.0, 0.0, 0.0, 1.0])


def circuit_of(cfg: Config, r: Resolved) -> CurrentCircuit:
    """The current loop's circuit from a config and its derived values."""
    pl, s = cfg.plant, cfg.spec
    mean_line = 2.0 * math.sqrt(2.0) / math.pi * s.vin_rms_nominal  # |v| over a half (analytic)
    return CurrentCircuit(
        r.inductance_H,
        pl.source_inductance,
        pl.source_resistance,
        pl.dm_inductance,
        pl.dm_resistance,
        r.dm_damping_ohm,
        r.x_capacitance_F,
        min(max(1.0 - mean_line / s.vout, 0.0), 1.0),
    )


def line_fields(
    cfg: Config, r: Resolved, circuit: CurrentCircuit, carrier: str, a_rel: float = 0.0
) -> dict[str, Any]:
    """The sensed line's own paths around the current loop (``LoopDesign``'s line fields):
    with an input filter the duty's current moves the X capacitor, whose sampled voltage,
    through the feedforward's low-pass ``F(z)``, feeds the duty back through the feedforward
    ``1 - F |v|/V_o`` and the current reference ``P F |v|/V_rms^2``. The loop is placed and
    its margins reported at the design point, rated power at the nominal line (the
    operating point ``pfcrig loopgain`` measures by default; ``at_ref_gain`` gives the loop
    at another load or line: the reference's path adds phase at a crossover under the
    filter's resonance, so the margins are least at no load, ``tests/test_tuning.py`` checks
    them over the load range); without a filter the duty has no path to the sample (the
    grid's ``L di/dt`` at the sample instant is the ripple's slope, which the duty does not
    move).
    ``F``'s step is the firmware's ``FF_K`` (``design.derive.ff_step``)."""
    s = cfg.spec
    if not circuit.has_filter:
        return {}
    ts = 1.0 / s.fsw
    return {
        "line_num": tuple(
            float(x) for x in current_plant(circuit, s.vout, ts, carrier, a_rel, "line")[0]
        ),
        "ref_gain_A_per_V": ref_gain_A_per_V(cfg, s.power, s.vin_rms_nominal),
        "ff_k": ff_step(r.ff_corner_Hz, s.fsw),
        "vout_V": s.vout,
    }


def _ss_poly(phi: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Numerator of ``c (zI - phi)^-1 b`` over ``det(zI - phi)`` (SISO: ``det(zI - phi + b c)
    - det(zI - phi)``), descending powers of z, as long as the denominator."""
    return np.poly(phi - np.outer(b, c)) - np.poly(phi)


def current_plant(
    circuit: CurrentCircuit,
    vout_V: float,
    ts: float,
    carrier: str = "centre",
    a_rel: float = 0.0,
    output: str = "current",
) -> tuple[np.ndarray, np.ndarray]:
    """The duty to current-sample plant of ``carrier``'s timing (module docstring). Each
    period's duty acts through pulses of the bridge voltage at the switching edges it moves,
    of area ``V_o T`` per unit duty; the samples see their impulse response ``g(t) = c e^{At}
    b`` (``circuit.states``), summed in closed form: ``sum_j c e^{A (jT + tau)} b z^-j = c
    e^{A tau} z (zI - Phi)^-1 b``, ``Phi = e^{AT}`` (exact for the linear circuit; the edges'
    finite width left out). Centre-aligned: edges at ``d T/2`` after the period start and
    before its end, the sample at mid-period, so ``tau = (1 - d) T/2`` for the first and ``(1
    + d) T/2`` one period on for the second; with the boost inductance alone ``(K_i T/2) (z +
    1)/(z (z - 1))``. Edge-aligned: the low switch's edge at ``d_low T`` after the start, the
    sample at half of it (``d_low = 1 - 2 a'``), so the sample moves ``a' K_i T`` along the
    period's own ramp (the boost inductor alone at that scale) and the edge reaches the
    samples from the next one on with ``tau = T - d_low T/2``; with the boost inductance
    alone ``K_i T ((1 - a') + a' z)/(z (z - 1))``. ``a' = a_rel`` in [0, 1/2], 0 the worst
    case, which the tuning uses. ``output = "line"``: the same pulses seen in the sampled line
    voltage (the X capacitor's; the sign of the voltage the duty's current takes off it),
    with a filter only (its own ramp at the sample is the capacitor's ripple, zero at the
    ramp's middle)."""
    t = timing(carrier)
    a, b, c = circuit.states()
    if output == "line":
        if not circuit.has_filter:
            raise ValueError("without an input filter the duty has no path to the sampled line")
        c = np.array([0.0, 0.0, 1.0, 0.0])
    phi = expm(a * ts)
    den = np.poly(phi)
    if t["carrier"] == "centre-aligned" and t["sample"] == "counter top":
        d = circuit.duty
        first = _ss_poly(phi, b, c @ expm(a * (1.0 - d) * ts / 2.0))
        second = _ss_poly(phi, b, c @ expm(a * (1.0 + d) * ts / 2.0))
        num = 0.5 * vout_V * ts * np.polyadd(np.polymul(first, [1.0, 0.0]), second)
    elif t["carrier"] == "edge-aligned" and t["sample"] == "half the low switch's on-time":
        if not 0.0 <= a_rel <= 0.5:
            raise ValueError(f"a_rel {a_rel} outside [0, 0.5]")
        tau = ts * (1.0 + 2.0 * a_rel) / 2.0
        later = _ss_poly(phi, b, c @ expm(a * tau))
        own = a_rel * float(c @ b) * den  # the period's own ramp, over the same denominator
        num = vout_V * ts * np.polyadd(own, later)
    else:
        raise NotImplementedError(f"no sampled current plant derived for {t}")
    return _trim(num), np.polymul(den, [1.0, 0.0])  # the compare takes effect a period on


def _trim(num: np.ndarray) -> np.ndarray:
    """Drop leading coefficients that are zero to rounding."""
    num = np.asarray(num, dtype=float)
    scale = float(np.max(np.abs(num))) or 1.0
    k = 0
    while k < len(num) - 1 and abs(num[k]) <= 1e-13 * scale:
        k += 1
    return num[k:]


def voltage_plant(k_v: float, tv: float, blocks: int = BUS_BLOCKS) -> tuple[np.ndarray, np.ndarray]:
    """P_v(z): power command held over a block to the sliding mean of ``blocks`` block means."""
    num = 0.5 * k_v * tv / blocks * np.polymul([1.0, 1.0], np.ones(blocks))
    den = np.polymul(np.concatenate(([1.0], np.zeros(blocks))), [1.0, -1.0])
    return num, den


@dataclass(frozen=True)
class Tuning:
    current: LoopDesign
    voltage: LoopDesign

    def as_dict(self) -> dict:
        return {"current": self.current.as_dict(), "voltage": self.voltage.as_dict()}


def tune(cfg: Config, r: Resolved, line_freq_Hz: float | None = None) -> Tuning:
    """Gains for both loops on the derived values ``r`` (the inductor, the bus capacitor, the
    current bandwidth, the input filter); ``line_freq_Hz`` (default: the spec's) sets the
    voltage-loop update."""
    try:
        return _tune(cfg, r, line_freq_Hz)
    except ConfigError as exc:  # name the file too
        raise ConfigError(f"{cfg.source}: {exc}") from None


def _tune(cfg: Config, r: Resolved, line_freq_Hz: float | None) -> Tuning:
    s, c = cfg.spec, cfg.control
    ts = 1.0 / s.fsw
    fl = s.line_freq if line_freq_Hz is None else line_freq_Hz
    th = 1.0 / (2.0 * fl)
    tv = th / BUS_BLOCKS
    circuit = circuit_of(cfg, r)
    k_i = s.vout / r.inductance_H
    k_v = s.efficiency / (r.capacitance_F * s.vout)
    cur = _design(
        "current_bandwidth/current_phase_margin_deg",
        k_i,
        *current_plant(circuit, s.vout, ts, c.carrier),
        r.current_bandwidth_Hz,
        c.current_phase_margin_deg,
        ts,
        "duty per A",
        **line_fields(cfg, r, circuit, c.carrier),
    )
    vol = _design(
        "voltage_bandwidth/voltage_phase_margin_deg",
        k_v,
        *voltage_plant(k_v, tv),
        c.voltage_bandwidth,
        c.voltage_phase_margin_deg,
        tv,
        "W per V",
    )
    return Tuning(cur, vol)
