"""PI gains of the two loops from target crossover and phase margin, and the
margins the resulting discrete loops actually achieve.

Models (averaged boost small-signal model, Erickson & Maksimovic, Fundamentals of
Power Electronics, averaged switch modelling chapters):

* current loop: duty -> inductor current ``G_i(s) = Vo/(s L)`` (from
  ``L di/dt = v - (1 - d) Vo``), with a sample-to-effect delay
  ``exp(-s Td)``, ``Td = control_delay_periods / fsw`` (1.5 periods by default:
  one for the computation, half for the PWM hold);
* voltage loop: input power command -> bus voltage ``G_v(s) = eta/(s C Vo)``
  (energy balance ``C Vo dv/dt = eta P_cmd - P_load``, constant-power load, the
  least damped case).  The controller averages the bus over a sliding window of
  one half line cycle ``Th = 1/(2 f_line)`` kept in ``BUS_BLOCKS`` blocks and updates
  the PI at the end of each block (period ``Th/BUS_BLOCKS``), which adds
  ``exp(-s (Th/2 + Th/(2 BUS_BLOCKS)))``: half the window for the average, half a
  block for the hold.

Both PIs are discretised by backward Euler, ``C(z) = Kp + Ki T z/(z - 1)``; the
reported margins evaluate that discrete PI at ``z = exp(j w T)`` in series with the
continuous plant and delay, on a dense frequency grid (computed, not assumed).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from .config import Config, ConfigError

BUS_BLOCKS = 8  # blocks of the sliding half-cycle bus average (a power of two)


@dataclass(frozen=True)
class LoopDesign:
    """One PI loop: gains, the discrete step, the target and the achieved figures."""

    name: str
    kp: float  # loop-specific units, see ``units``
    ki: float  # kp units per second
    ts_s: float  # PI update period
    delay_s: float
    plant_gain: float  # K in G(s) = K/s
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

    def loop_gain(self, f_Hz: np.ndarray) -> np.ndarray:
        """Open-loop gain C(exp(jwT)) G(jw) exp(-jw Td) at frequencies ``f_Hz``."""
        w = 2.0 * np.pi * np.asarray(f_Hz, dtype=float)
        z = np.exp(1j * w * self.ts_s)
        pi = self.kp + self.ki * self.ts_s * z / (z - 1.0)
        return pi * self.plant_gain / (1j * w) * np.exp(-1j * w * self.delay_s)


def _pi_for(
    k_plant: float, fc: float, pm_deg: float, delay: float, name: str
) -> tuple[float, float]:
    wc = 2.0 * math.pi * fc
    delay_deg = math.degrees(wc * delay)
    lag = 90.0 - pm_deg - delay_deg  # phase the PI zero may still take
    if lag <= 0.5:
        best = 90.0 - delay_deg - 0.5
        raise ConfigError(
            f"[control] {name}: a phase margin of {pm_deg:g} deg at {fc:g} Hz is not reachable "
            "with the "
            f"{delay_deg:.1f} deg delay there; at most {best:.1f} deg, or lower the bandwidth"
        )
    wi = wc * math.tan(math.radians(lag))
    kp = wc / (k_plant * math.hypot(1.0, wi / wc))
    return kp, kp * wi


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
    name: str, k_plant: float, fc: float, pm: float, delay: float, ts: float, units: str
) -> LoopDesign:
    kp, ki = _pi_for(k_plant, fc, pm, delay, name)
    loop = LoopDesign(name, kp, ki, ts, delay, k_plant, fc, pm, math.nan, math.nan, math.nan, units)
    got = _margins(loop)
    return LoopDesign(name, kp, ki, ts, delay, k_plant, fc, pm, *got, units)


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
    cur = _design(
        "current_bandwidth/current_phase_margin_deg",
        s.vout / inductance_H,
        current_bandwidth_Hz,
        c.current_phase_margin_deg,
        c.control_delay_periods * ts,
        ts,
        "duty per A",
    )
    vol = _design(
        "voltage_bandwidth/voltage_phase_margin_deg",
        s.efficiency / (capacitance_F * s.vout),
        c.voltage_bandwidth,
        c.voltage_phase_margin_deg,
        th / 2.0 + tv / 2.0,
        tv,
        "W per V",
    )
    return Tuning(cur, vol)
