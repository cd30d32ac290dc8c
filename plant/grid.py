"""Grid source for a batch of scenarios: amplitude, frequency, phase, harmonics, DC offset.

Per lane: ``v_s(t) = sqrt(2) Vrms a [sin(th) + sum_k h_k sin(k th + phi_k)] + v_dc`` with
``th = theta + 2 pi f t``; ``a`` is the dip/interruption factor (1 = healthy line).
The phase ``theta`` advances by ``2 pi f T`` each period, so a frequency step keeps
the waveform continuous and a phase jump is a step of ``theta``.  The formula is
evaluated by ``plant.kernel.source``; this class holds the settings.
"""

from __future__ import annotations

import numpy as np


class Grid:
    def __init__(
        self,
        n: int,
        vrms_V,
        freq_Hz,
        phase_deg=0.0,
        harmonics=(),
        dc_V=0.0,
        harmonics_per_lane=None,
    ):
        """``harmonics``: (order, amplitude as a fraction of the fundamental, phase in deg) triples
        for every lane; ``harmonics_per_lane``: instead, a list of ``n`` such sequences."""
        self.n = n
        self.vrms = np.broadcast_to(np.asarray(vrms_V, dtype=float), (n,)).copy()
        self.freq = np.broadcast_to(np.asarray(freq_Hz, dtype=float), (n,)).copy()
        self.theta = np.deg2rad(np.broadcast_to(np.asarray(phase_deg, dtype=float), (n,))).copy()
        self.dc = np.broadcast_to(np.asarray(dc_V, dtype=float), (n,)).copy()
        per_lane = (
            [tuple(harmonics)] * n if harmonics_per_lane is None else list(harmonics_per_lane)
        )
        orders = sorted({int(h[0]) for lane in per_lane for h in lane})
        # harm[j, h] = (order, amplitude fraction, phase rad) of lane j, shape (n, orders, 3)
        self.harm = np.zeros((n, len(orders), 3))
        for h, order in enumerate(orders):
            self.harm[:, h, 0] = order
            for j, lane in enumerate(per_lane):
                for k, a, deg in lane:
                    if int(k) == order:
                        self.harm[j, h, 1], self.harm[j, h, 2] = float(a), np.deg2rad(float(deg))
