"""ADC model: scaling, gain and offset errors, seeded noise, quantisation, rails.

Bipolar channels (line voltage, inductor current): ``code = offset + x/scale``;
unipolar bus: ``code = x/scale``.  Each true value is multiplied by ``1 + gain_err``,
shifted by ``offset_err`` codes, has Gaussian noise of ``noise`` codes rms added,
is rounded to the nearest code and clipped to ``0..full``.

The noise of lane ``j`` in conversion ``k`` on channel ``c`` is a function of
(seed_j, k, c) only (a counter-based generator: splitmix64, then Box-Muller), so a
scenario gives the same samples alone or inside any batch.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class AdcScaling:
    full_counts: int
    vac_V_per_count: float
    vac_offset_counts: float
    il_A_per_count: float
    il_offset_counts: float
    vbus_V_per_count: float


class Sensors:
    def __init__(self, scaling: AdcScaling, n: int, seed=0, gain_err=(0.0, 0.0, 0.0),
                 offset_err=(0.0, 0.0, 0.0), noise=(0.0, 0.0, 0.0)):
        """``seed``: scalar or per lane; ``gain_err``, ``offset_err`` (codes), ``noise`` (codes rms):
        per channel (vac, il, vbus), scalars or arrays of shape (n,)."""
        self.s = scaling
        self.n = n
        self.seed = np.broadcast_to(np.asarray(seed, dtype=np.uint64), (n,)).copy()
        self.count = 0
        self.gain = [np.broadcast_to(np.asarray(g, dtype=float), (n,)) for g in gain_err]
        self.offset = [np.broadcast_to(np.asarray(o, dtype=float), (n,)) for o in offset_err]
        self.noise = [np.broadcast_to(np.asarray(z, dtype=float), (n,)) for z in noise]
        self.any_noise = any(np.any(z > 0) for z in self.noise)

    def convert(self, vac_V, il_A, vbus_V) -> np.ndarray:
        """Codes, shape (n, 3) uint16 in channel order (vac, il, vbus)."""
        s = self.s
        raw = [
            s.vac_offset_counts + vac_V * (1.0 + self.gain[0]) / s.vac_V_per_count,
            s.il_offset_counts + il_A * (1.0 + self.gain[1]) / s.il_A_per_count,
            vbus_V * (1.0 + self.gain[2]) / s.vbus_V_per_count,
        ]
        out = np.empty((self.n, 3), dtype=np.uint16)
        for ch in range(3):
            x = raw[ch] + self.offset[ch]
            if self.any_noise:
                x = x + self.noise[ch] * _gauss(self.seed, self.count, ch)
            out[:, ch] = np.clip(np.rint(x), 0, s.full_counts).astype(np.uint16)
        self.count += 1
        return out


_M64 = np.uint64(0xFFFFFFFFFFFFFFFF)


def _splitmix(x: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        z = x + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


def _gauss(seed: np.ndarray, k: int, ch: int) -> np.ndarray:
    """Standard normal draws, one per lane, from (seed, conversion k, channel ch)."""
    with np.errstate(over="ignore"):
        base = _splitmix(seed ^ np.uint64((k * 8 + ch) & 0xFFFFFFFFFFFFFFFF))
        u1 = (_splitmix(base) >> np.uint64(11)).astype(np.float64) * (1.0 / 9007199254740992.0)
        u2 = (_splitmix(base ^ np.uint64(0xD1B54A32D192ED03)) >> np.uint64(11)).astype(np.float64) * (1.0 / 9007199254740992.0)
    return np.sqrt(-2.0 * np.log1p(-u1)) * np.cos(2.0 * np.pi * u2)
