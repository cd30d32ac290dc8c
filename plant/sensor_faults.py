"""Failed sensors, as the controller's ADC would read them: a per-lane, per-channel fault
applied to the codes after the conversion (``plant.adc``), so every controller sees the same
failure whatever computes its outputs.

Faults (``FAULTS``), on channel ``ch`` (0 line voltage, 1 inductor current, 2 bus voltage;
with split line sensing 0 is L and 3 is N, each to the bus minus):

- ``stuck``: the code is ``value`` (counts) whatever the signal;
- ``offset``: ``value`` counts added to the code;
- ``gain``: the signal about the channel's zero code multiplied by ``value`` (0.8 reads 80 %);
- ``glitch``: the code is ``value`` for ``periods`` periods, then the channel reads normally;
- ``open``: the input disconnected; this front end's amplifiers are biased to the channel's
  zero code (the bipolar channels' offset, 0 counts for the bus), so an open input reads
  0 V or 0 A.  A front end with a pull-up reads its top rail instead: ``stuck`` at full scale.

Every result is rounded and clipped to the ADC's range ``0..full`` as the converter would.
"""

from __future__ import annotations

import numpy as np

FAULTS = ("stuck", "offset", "gain", "glitch", "open")
CHANNELS = ("vac", "il", "vbus")  # one bipolar line channel
CHANNELS_SPLIT = ("vl", "il", "vbus", "vn")  # L and N apart


def channel_names(split: bool) -> tuple[str, ...]:
    """The ADC channels' names in a scenario's sensor events, in the input record's order."""
    return CHANNELS_SPLIT if split else CHANNELS


NONE, STUCK, OFFSET, GAIN, GLITCH, OPEN = range(6)


class SensorFaults:
    """The active sensor faults of ``n`` lanes; ``zero_counts``: the code of 0 V / 0 A per
    channel; ``full_counts``: the top code."""

    def __init__(self, n: int, zero_counts: tuple[float, ...], full_counts: int):
        nch = len(zero_counts)
        self.kind = np.zeros((n, nch), dtype=np.int8)
        self.value = np.zeros((n, nch))
        self.until_s = np.full((n, nch), np.inf)
        self.zero = np.asarray(zero_counts, dtype=float)
        self.full = float(full_counts)
        self.active = False

    def set(self, j: int, ch: int, fault: str, value: float, until_s: float) -> None:
        """Lane ``j``'s channel ``ch`` fails with ``fault`` (one of ``FAULTS``) until
        ``until_s`` (run time, s; ``inf``: for good)."""
        self.kind[j, ch] = FAULTS.index(fault) + 1
        self.value[j, ch] = self.zero[ch] if fault == "open" else value
        self.until_s[j, ch] = until_s
        self.active = True

    def apply(self, t_s: float, codes: np.ndarray) -> None:
        """Overwrite ``codes`` (n, channels) uint16 of the period starting at ``t_s`` in place."""
        if not self.active:
            return
        ended = (self.kind != NONE) & (t_s >= self.until_s)
        self.kind[ended] = NONE
        if not self.kind.any():
            self.active = False
            return
        raw = codes.astype(float)
        k, v = self.kind, self.value
        out = np.where((k == STUCK) | (k == GLITCH) | (k == OPEN), v, raw)
        out = np.where(k == OFFSET, raw + v, out)
        out = np.where(k == GAIN, self.zero + (raw - self.zero) * v, out)
        codes[:] = np.clip(np.rint(out), 0.0, self.full).astype(np.uint16)
