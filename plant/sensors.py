"""ADC model: scaling, gain and offset errors, seeded noise, quantisation, rails.

Bipolar channels (line voltage, inductor current): ``code = offset + x/scale``;
unipolar bus: ``code = x/scale``.  Each true value is multiplied by ``1 + gain_err``,
shifted by ``offset_err`` codes, has Gaussian noise of ``noise`` codes rms added,
is rounded to the nearest code and clipped to ``0..full``.
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
    def __init__(self, scaling: AdcScaling, n: int, seed: int = 0, gain_err=(0.0, 0.0, 0.0),
                 offset_err=(0.0, 0.0, 0.0), noise=(0.0, 0.0, 0.0)):
        """``gain_err``, ``offset_err`` (codes), ``noise`` (codes rms): per channel (vac, il, vbus),
        scalars or arrays of shape (n,)."""
        self.s = scaling
        self.n = n
        self.rng = np.random.default_rng(seed)
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
                x = x + self.noise[ch] * self.rng.standard_normal(self.n)
            out[:, ch] = np.clip(np.rint(x), 0, s.full_counts).astype(np.uint16)
        return out
