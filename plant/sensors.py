"""ADC model: scaling, gain and offset errors, seeded noise, quantisation, rails.

Bipolar channels (line voltage, inductor current): ``code = offset + x/scale``;
unipolar bus: ``code = x/scale``.  Each true value is multiplied by ``1 + gain_err``,
shifted by ``offset_err`` codes, has Gaussian noise of ``noise`` codes rms added,
is rounded to the nearest code and clipped to ``0..full``.

The noise of lane ``j`` in conversion ``k`` on channel ``c`` is a function of
(seed_j, k, c) only (a counter-based generator: splitmix64, then Box-Muller), so a
scenario gives the same samples alone or inside any batch.  The arithmetic is
``plant.kernel.adc_channel``; this class holds the settings.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import adc as K
from . import layout as LY


@dataclass(frozen=True)
class AdcScaling:
    full_counts: int
    vac_V_per_count: float
    vac_offset_counts: float
    il_A_per_count: float
    il_offset_counts: float
    vbus_V_per_count: float


class Sensors:
    def __init__(
        self,
        scaling: AdcScaling,
        n: int,
        seed=0,
        gain_err=(0.0, 0.0, 0.0),
        offset_err=(0.0, 0.0, 0.0),
        noise=(0.0, 0.0, 0.0),
    ):
        """``seed``: scalar or per lane; ``gain_err``, ``offset_err`` (codes), ``noise`` (codes
        rms):
        per channel (vac, il, vbus), scalars or arrays of shape (n,)."""
        self.s = scaling
        self.n = n
        self.seed = np.broadcast_to(np.asarray(seed, dtype=np.uint64), (n,)).copy()
        self.count = 0
        self.gain = [np.broadcast_to(np.asarray(g, dtype=float), (n,)) for g in gain_err]
        self.offset = [np.broadcast_to(np.asarray(o, dtype=float), (n,)) for o in offset_err]
        self.noise = [np.broadcast_to(np.asarray(z, dtype=float), (n,)) for z in noise]

    def pack(self, par: np.ndarray, lane: np.ndarray) -> None:
        """Write the scaling into the kernel's parameter vector and each lane's errors into
        its lane rows (``plant.kernel`` layout)."""
        s = self.s
        par[LY.P_FULL], par[LY.P_VAC_CPV], par[LY.P_VAC_OFF] = (
            s.full_counts,
            1.0 / s.vac_V_per_count,
            s.vac_offset_counts,
        )
        par[LY.P_IL_CPA], par[LY.P_IL_OFF], par[LY.P_VBUS_CPV] = (
            1.0 / s.il_A_per_count,
            s.il_offset_counts,
            1.0 / s.vbus_V_per_count,
        )
        for ch in range(3):
            lane[:, LY.L_GAIN0 + ch], lane[:, LY.L_OFF0 + ch], lane[:, LY.L_NOISE0 + ch] = (
                self.gain[ch],
                self.offset[ch],
                self.noise[ch],
            )

    def convert(self, vac_V, il_A, vbus_V) -> np.ndarray:
        """Codes, shape (n, 3) uint16 in channel order (vac, il, vbus); each call is the next
        conversion."""
        par, lane = np.zeros(LY.PAR_ROWS), np.zeros((self.n, LY.LANE_ROWS))
        self.pack(par, lane)
        out = np.empty((self.n, 3), dtype=np.uint16)
        f = lambda x: np.ascontiguousarray(np.broadcast_to(np.asarray(x, dtype=float), (self.n,)))  # noqa: E731
        K.adc_lanes(par, lane, self.seed, self.count, f(vac_V), f(il_A), f(vbus_V), out)
        self.count += 1
        return out
