"""ADC model: scaling, gain and offset errors, seeded noise, quantisation, rails.

Bipolar channels (line voltage, inductor current): ``code = offset + x/scale``;
unipolar bus: ``code = x/scale``.  With split line sensing (``ln_V_per_count`` > 0) the line
channel is replaced by L to the bus minus (channel 0) and N to the bus minus (channel 3),
both unipolar like the bus.  Each true value is multiplied by ``1 + gain_err``,
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
    ln_V_per_count: float = 0.0  # > 0: split line sensing (L and N apart)

    @property
    def channels(self) -> int:
        """ADC channels per conversion: 3, or 4 with split line sensing."""
        return 4 if self.ln_V_per_count > 0.0 else 3

    @property
    def zero_counts(self) -> tuple[float, ...]:
        """The code of 0 V / 0 A of each channel."""
        if self.channels == 4:
            return (0.0, self.il_offset_counts, 0.0, 0.0)
        return (self.vac_offset_counts, self.il_offset_counts, 0.0)


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
        rms): per channel (vac, il, vbus; with split sensing a fourth, N: when only three are
        given, N has the line channel's noise and no gain or offset error), scalars or arrays
        of shape (n,)."""
        self.s = scaling
        self.n = n
        self.seed = np.broadcast_to(np.asarray(seed, dtype=np.uint64), (n,)).copy()
        self.count = 0
        self.gain = [np.broadcast_to(np.asarray(g, dtype=float), (n,)) for g in gain_err]
        self.offset = [np.broadcast_to(np.asarray(o, dtype=float), (n,)) for o in offset_err]
        self.noise = [np.broadcast_to(np.asarray(z, dtype=float), (n,)) for z in noise]
        zero = np.zeros(n)
        for got, fill in ((self.gain, zero), (self.offset, zero), (self.noise, self.noise[0])):
            if len(got) < scaling.channels:
                got.append(fill)

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
        par[LY.P_LN_CPV] = 1.0 / s.ln_V_per_count if s.ln_V_per_count > 0.0 else 0.0
        for ch in range(s.channels):
            lane[:, LY.L_GAIN0 + ch], lane[:, LY.L_OFF0 + ch], lane[:, LY.L_NOISE0 + ch] = (
                self.gain[ch],
                self.offset[ch],
                self.noise[ch],
            )

    def convert(self, vac_V, il_A, vbus_V) -> np.ndarray:
        """Codes, shape (n, 3) uint16 in channel order (vac, il, vbus); each call is the next
        conversion (one bipolar line channel)."""
        if self.s.channels != 3:
            raise ValueError("convert() takes one bipolar line channel, not split sensing")
        par, lane = np.zeros(LY.PAR_ROWS), np.zeros((self.n, LY.LANE_ROWS))
        self.pack(par, lane)
        out = np.empty((self.n, 3), dtype=np.uint16)
        f = lambda x: np.ascontiguousarray(np.broadcast_to(np.asarray(x, dtype=float), (self.n,)))  # noqa: E731
        K.adc_lanes(par, lane, self.seed, self.count, f(vac_V), f(il_A), f(vbus_V), out)
        self.count += 1
        return out
