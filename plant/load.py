"""DC loads on the bus: resistive or constant power, with power steps.

A load connects once the bus has reached ``connect_V`` (a downstream converter waits
for its power-good) and disconnects below ``uvlo_V`` (its under-voltage lockout), to
connect again only at power-good: a hysteresis that real downstream converters have.
A resistive load draws ``G = P/vout^2``; a constant-power load ``I = P/max(v_bus, uvlo)``,
frozen over each period.  The kernel (``plant.kernel.step_lanes``) applies these rules;
this class holds the settings.
"""

from __future__ import annotations

import numpy as np


class Load:
    def __init__(self, n: int, kind, power_W, vout_V: float, connect_V=None, uvlo_V=None):
        kinds = np.broadcast_to(np.asarray(kind), (n,))
        self.constant_power = kinds == "constant_power"
        self.power = np.broadcast_to(np.asarray(power_W, dtype=float), (n,)).copy()
        self.vout = vout_V
        self.connect_V = 0.95 * vout_V if connect_V is None else connect_V
        self.uvlo_V = 0.5 * vout_V if uvlo_V is None else uvlo_V
