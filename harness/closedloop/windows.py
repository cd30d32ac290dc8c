"""Which stretch of a run each figure is measured over, chosen from the records.

* The steady window: the last IEC 61000-4-7 window (10 cycles of a 50 Hz line, 12 of a
  60 Hz one) synchronised to the measured fundamental (it starts and ends at positive-going
  zero crossings of the line voltage), provided it starts after start-up (the first period in
  RUN with the half-cycle-mean bus within ``SETTLE_BAND`` of vout) and after the last event
  plus its settling (the half-cycle-mean bus back within the band for good), and the
  supervisor stays in RUN throughout.  Otherwise there is no steady window, and the reason
  says why.
* Each event's window: from the event to the next event or the end of the run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from design.contract import Mode

from . import metrics
from .scenario import Event, Scenario

SETTLE_BAND = 0.02  # of vout: start-up done and events settled once the bus is this close


@dataclass(frozen=True)
class Window:
    """A steady window [start_s, end_s) of ``cycles`` line cycles at ``freq_Hz``, or none
    (``steady`` False, ``reason`` why)."""

    start_s: float
    end_s: float
    steady: bool
    reason: str
    freq_Hz: float
    cycles: int

    def slice(self, fs_Hz: float) -> slice:
        return slice(int(round(self.start_s * fs_Hz)), int(round(self.end_s * fs_Hz)))


def event_end_s(ev: Event, freq_Hz: float) -> float:
    """When an event is over: a dip's line returns after its cycles; others act at once."""
    return ev.t_s + (ev.get("cycles") / freq_Hz if ev.kind == "dip" else 0.0)


def final_frequency(scn: Scenario) -> float:
    """The line frequency in force at the end of the scenario (Hz)."""
    f = scn.freq_Hz
    for ev in scn.events:
        if ev.kind == "freq":
            f = ev.get("hz")
    return f


def rising_crossings(t: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Times (s) of the positive-going zero crossings of ``v``, interpolated linearly."""
    k = np.nonzero((v[:-1] < 0.0) & (v[1:] >= 0.0))[0]
    return t[k] + (t[k + 1] - t[k]) * (-v[k] / (v[k + 1] - v[k]))


def _settled_after(t: np.ndarray, smooth: np.ndarray, t0: float, vout: float) -> float:
    """First time at or after ``t0`` from which the half-cycle-mean bus stays within the
    band of vout to the end of the record (inf: never)."""
    out = np.abs(smooth - vout) > SETTLE_BAND * vout
    out &= t >= t0
    if not out.any():
        return t0
    last = int(np.nonzero(out)[0][-1])
    return float(t[last + 1]) if last + 1 < len(t) else math.inf


def steady_window(
    t: np.ndarray,
    vs: np.ndarray,
    mode: np.ndarray,
    vbus: np.ndarray,
    scn: Scenario,
    vout_V: float,
    fs_Hz: float,
) -> Window:
    """The steady window of a run (see the module docstring)."""
    f_end = final_frequency(scn)
    cycles = metrics.window_cycles(f_end)
    span = cycles / f_end
    duration = float(t[-1] + 1.0 / fs_Hz)

    def none(reason: str) -> Window:
        return Window(math.nan, math.nan, False, reason, f_end, cycles)

    if duration < span:
        return none(
            f"the run ({duration:.3f} s) is shorter than one IEC 61000-4-7 window "
            f"({cycles} cycles = {span:.3f} s)"
        )
    smooth = metrics.half_cycle_mean(vbus, fs_Hz, f_end)
    ok = (mode == Mode.RUN) & (np.abs(smooth - vout_V) <= SETTLE_BAND * vout_V)
    if not ok.any():
        return none(
            "the stage never reached regulation (mode run with the bus within "
            f"{100 * SETTLE_BAND:g} % of vout)"
        )
    earliest = float(t[np.argmax(ok)])
    if scn.events:
        last = max(event_end_s(ev, f_end) for ev in scn.events)
        settled = _settled_after(t, smooth, last, vout_V)
        if not math.isfinite(settled):
            return none(
                f"the bus had not settled within {100 * SETTLE_BAND:g} % of vout after "
                f"the last event (over at {last:.3f} s) by the end of the run"
            )
        earliest = max(earliest, settled)
    zc = rising_crossings(t, vs)
    if len(zc) <= cycles:
        return none(f"fewer than {cycles + 1} line zero crossings to synchronise a window to")
    start, end = float(zc[-cycles - 1]), float(zc[-1])
    f_meas = cycles / (end - start)
    if start < earliest:
        return none(
            f"no {cycles}-cycle window fits between the settling at {earliest:.3f} s "
            f"and the last line zero crossing at {end:.3f} s"
        )
    sel = (t >= start) & (t < end)
    if np.any(mode[sel] != Mode.RUN):
        return none("the supervisor left run inside the last window")
    return Window(start, end, True, "", float(f_meas), cycles)


def event_windows(scn: Scenario, duration_s: float) -> list[tuple[float, float]]:
    """[start, end) of each event's response: to the next event or the end of the run."""
    times = [ev.t_s for ev in scn.events]
    return [(a, times[k + 1] if k + 1 < len(times) else duration_s) for k, a in enumerate(times)]
