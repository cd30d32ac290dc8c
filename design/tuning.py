"""PI gains of the two loops from target crossover and phase margin, placed and checked on
the exact sampled loops the firmware and the plant form.

Averaged plants (Erickson & Maksimovic, Fundamentals of Power Electronics, averaged switch
modelling chapters): current loop duty -> inductor current ``K_i/s``, ``K_i = Vo/L`` (from
``L di/dt = v - (1 - d) Vo``; ``L`` the boost inductor with the grid's and the DM inductance in
series, ``series_inductance_H``); voltage loop input power command -> bus voltage ``K_v/s``,
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
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace

import numpy as np

from .config import Config, ConfigError
from .contract import timing

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

    def loop_gain(self, f_Hz: np.ndarray) -> np.ndarray:
        """Open-loop gain C(exp(jwT)) P(exp(jwT)) at frequencies ``f_Hz``."""
        z = np.exp(2j * np.pi * np.asarray(f_Hz, dtype=float) * self.ts_s)
        pi = self.kp + self.ki * self.ts_s * z / (z - 1.0)
        return pi * self.plant(f_Hz)


def _pi_for(
    plant: Callable[[float], complex], ts: float, fc: float, pm_deg: float, name: str
) -> tuple[float, float]:
    """(kp, ki) placing ``C(z) P(z)`` at magnitude 1 and phase -180 + pm at ``fc``:
    ``kp + ki q = C_t`` with ``q = T z/(z - 1)``, real and imaginary parts."""
    z = complex(np.exp(2j * math.pi * fc * ts))
    p = complex(plant(fc))
    ct = complex(np.exp(1j * math.radians(pm_deg - 180.0))) / p
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


def _margins(loop: LoopDesign) -> tuple[float, float, float]:
    nyq = 0.5 / loop.ts_s
    f = np.logspace(math.log10(loop.target_crossover_Hz) - 3, math.log10(nyq * 0.999), 20000)
    g = loop.loop_gain(f)
    mag = np.abs(g)
    ph = np.unwrap(np.angle(g))
    i = np.nonzero((mag[:-1] >= 1.0) & (mag[1:] < 1.0))[0]
    if len(i) == 0:
        raise ConfigError(
            f"[control] {loop.name}: the loop gain never crosses 1 below Nyquist; check the "
            "bandwidth"
        )
    k = i[0]
    t = (0.0 - math.log(mag[k])) / (math.log(mag[k + 1]) - math.log(mag[k]))
    fc = math.exp(math.log(f[k]) + t * (math.log(f[k + 1]) - math.log(f[k])))
    pm = 180.0 + math.degrees(ph[k] + t * (ph[k + 1] - ph[k]))
    j = np.nonzero((ph[:-1] > -np.pi) & (ph[1:] <= -np.pi))[0]
    gm = -20.0 * math.log10(mag[j[0]]) if len(j) else math.inf
    return fc, pm, gm


def _design(
    name: str,
    k_plant: float,
    num: np.ndarray,
    den: np.ndarray,
    fc: float,
    pm: float,
    ts: float,
    units: str,
) -> LoopDesign:
    nums, dens = tuple(float(x) for x in num), tuple(float(x) for x in den)
    nan = math.nan
    probe = LoopDesign(name, 0.0, 0.0, ts, k_plant, nums, dens, fc, pm, nan, nan, nan, units)
    kp, ki = _pi_for(lambda f: complex(probe.plant(f)), ts, fc, pm, name)
    loop = LoopDesign(name, kp, ki, ts, k_plant, nums, dens, fc, pm, nan, nan, nan, units)
    return LoopDesign(name, kp, ki, ts, k_plant, nums, dens, fc, pm, *_margins(loop), units)


def with_plant(loop: LoopDesign, num: np.ndarray, den: np.ndarray) -> LoopDesign:
    """``loop``'s PI on another sampled plant (for example the edge-aligned current plant at
    another point of the line cycle), its crossover and margins computed afresh."""
    nums, dens = tuple(float(x) for x in num), tuple(float(x) for x in den)
    nan = math.nan
    other = replace(loop, plant_num=nums, plant_den=dens, crossover_Hz=nan)
    other = replace(other, phase_margin_deg=nan, gain_margin_dB=nan)
    fc, pm, gm = _margins(other)
    return replace(other, crossover_Hz=fc, phase_margin_deg=pm, gain_margin_dB=gm)


def current_plant(
    k_i: float, ts: float, carrier: str = "centre", a_rel: float = 0.0
) -> tuple[np.ndarray, np.ndarray]:
    """The duty to current-sample plant of ``carrier``'s timing (module docstring):
    centre-aligned ``(K_i T/2) (z + 1)/(z (z - 1))``; edge-aligned ``K_i T ((1 - a') + a' z)/
    (z (z - 1))`` with ``a' = a_rel`` in [0, 1/2] (0: the worst case, which the tuning uses)."""
    t = timing(carrier)
    if t["carrier"] == "centre-aligned" and t["sample"] == "counter top":
        a = 0.5 * k_i * ts
        return np.array([a, a]), np.array([1.0, -1.0, 0.0])
    if t["carrier"] == "edge-aligned" and t["sample"] == "half the low switch's on-time":
        if not 0.0 <= a_rel <= 0.5:
            raise ValueError(f"a_rel {a_rel} outside [0, 0.5]")
        k = k_i * ts
        return np.array([a_rel * k, (1.0 - a_rel) * k]), np.array([1.0, -1.0, 0.0])
    raise NotImplementedError(f"no sampled current plant derived for {t}")


def voltage_plant(k_v: float, tv: float, blocks: int = BUS_BLOCKS) -> tuple[np.ndarray, np.ndarray]:
    """P_v(z): power command held over a block to the sliding mean of ``blocks`` block means."""
    num = 0.5 * k_v * tv / blocks * np.polymul([1.0, 1.0], np.ones(blocks))
    den = np.polymul(np.concatenate(([1.0], np.zeros(blocks))), [1.0, -1.0])
    return num, den


def series_inductance_H(cfg: Config, inductance_H: float) -> float:
    """The inductance the current loop drives around its crossover (H): the boost inductor
    with the grid's inductance in series, and with an input filter its DM inductor too. The
    filter's X capacitor decouples them only above its resonance; at a crossover well below it
    (f_sw/15 against 16-27 kHz on the shipped configs) its impedance is some ten times the
    inductances', so the current loop's plant is the sum (the measured appliance loop crossed
    over 12 % below a design on the boost inductor alone)."""
    pl = cfg.plant
    dm = pl.dm_inductance if pl.x_capacitance > 0.0 else 0.0
    return inductance_H + pl.source_inductance + dm


@dataclass(frozen=True)
class Tuning:
    current: LoopDesign
    voltage: LoopDesign

    def as_dict(self) -> dict:
        return {"current": self.current.as_dict(), "voltage": self.voltage.as_dict()}


def tune(
    cfg: Config,
    inductance_H: float,
    capacitance_F: float,
    current_bandwidth_Hz: float,
    line_freq_Hz: float | None = None,
) -> Tuning:
    """Gains for both loops; ``line_freq_Hz`` (default: the spec's) sets the voltage-loop update."""
    try:
        return _tune(cfg, inductance_H, capacitance_F, current_bandwidth_Hz, line_freq_Hz)
    except ConfigError as exc:  # name the file too
        raise ConfigError(f"{cfg.source}: {exc}") from None


def _tune(
    cfg: Config,
    inductance_H: float,
    capacitance_F: float,
    current_bandwidth_Hz: float,
    line_freq_Hz: float | None,
) -> Tuning:
    s, c = cfg.spec, cfg.control
    ts = 1.0 / s.fsw
    fl = s.line_freq if line_freq_Hz is None else line_freq_Hz
    th = 1.0 / (2.0 * fl)
    tv = th / BUS_BLOCKS
    k_i = s.vout / series_inductance_H(cfg, inductance_H)
    k_v = s.efficiency / (capacitance_F * s.vout)
    cur = _design(
        "current_bandwidth/current_phase_margin_deg",
        k_i,
        *current_plant(k_i, ts, c.carrier),
        current_bandwidth_Hz,
        c.current_phase_margin_deg,
        ts,
        "duty per A",
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
