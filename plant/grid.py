"""Grid source for a batch of scenarios: amplitude, frequency, phase, harmonics, DC offset.

Per lane: ``v_s(t) = sqrt(2) Vrms a [sin(th) + sum_k h_k sin(k th + phi_k)] + v_dc`` with
``th = theta + 2 pi f t``; ``a`` is the dip/interruption factor (1 = healthy line).
The phase ``theta`` advances by ``2 pi f T`` each period, so a frequency step keeps
the waveform continuous and a phase jump is a step of ``theta``.
"""
from __future__ import annotations

import numpy as np


class Grid:
    def __init__(self, n: int, vrms_V, freq_Hz, phase_deg=0.0, harmonics=(), dc_V=0.0, harmonics_per_lane=None):
        """``harmonics``: (order, amplitude as a fraction of the fundamental, phase in deg) triples
        for every lane; ``harmonics_per_lane``: instead, a list of ``n`` such sequences."""
        self.vrms = np.broadcast_to(np.asarray(vrms_V, dtype=float), (n,)).copy()
        self.freq = np.broadcast_to(np.asarray(freq_Hz, dtype=float), (n,)).copy()
        self.theta = np.deg2rad(np.broadcast_to(np.asarray(phase_deg, dtype=float), (n,))).copy()
        self.scale = np.ones(n)
        self.dc = np.broadcast_to(np.asarray(dc_V, dtype=float), (n,)).copy()
        per_lane = [tuple(harmonics)] * n if harmonics_per_lane is None else list(harmonics_per_lane)
        orders = sorted({int(h[0]) for lane in per_lane for h in lane})
        self.harmonics = []
        for order in orders:
            amp = np.zeros(n)
            ph = np.zeros(n)
            for j, lane in enumerate(per_lane):
                for k, a, deg in lane:
                    if int(k) == order:
                        amp[j], ph[j] = float(a), np.deg2rad(float(deg))
            self.harmonics.append((order, amp, ph))

    def voltage(self, t_s: np.ndarray) -> np.ndarray:
        """Source voltage (V) at time ``t_s`` (s, per lane) after the present period start."""
        th = self.theta + 2.0 * np.pi * self.freq * t_s
        wave = np.sin(th)
        for k, a, ph in self.harmonics:
            wave = wave + a * np.sin(k * th + ph)
        return np.sqrt(2.0) * self.vrms * self.scale * wave + self.dc

    def advance(self, dt_s: float) -> None:
        self.theta = np.mod(self.theta + 2.0 * np.pi * self.freq * dt_s, 2.0 * np.pi)
