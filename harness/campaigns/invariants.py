"""The invariants every lane of a campaign is checked against: a table of small named
functions, each returning a message (violated) or ``None`` (held), with its bound stated.

  legs        never both slow-leg switches commanded on; compare within 0..period (the
              timer inserts the dead time of every complementary fast-leg edge)
  ov_oc       bus never above the over-voltage trip; inductor current never above the
              over-current trip in a period whose main switch conducts with the bus above
              the line, nor against the line voltage in any gated period (the line rectified
              into a bus below its peak flows through the diodes whatever the gates do)
  chatter     at most one slow-leg change per half line cycle
  recovery    after the line returns the half-cycle-mean bus is within 2 % of vout within
              RECOVERY_CYCLES line cycles (RESTART_CYCLES when the stage had to stop and
              restart: brown-out or an interruption beyond hold-up), and never above vout
              by more than OVERSHOOT_LIMIT; no fault latched
  zc_spike    in steady state, the line current's deviation from its fundamental where
              |v| < 25 % of the line peak stays below ZC_LIMIT_OF_RATED of the rated peak
              line current
  sane        no NaN or Inf in any record; supervisor modes change only along allowed edges
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from design.contract import MODE_EDGES, Gate, Mode
from design.project import Project
from harness.closedloop import metrics
from harness.closedloop.scenario import Scenario

from .cases import RECOVERY_CYCLES, RESTART_CYCLES, settle_s

# of the rated peak line current: at rated current the fundamental itself is at most this
# inside the zero-crossing region (|v| < metrics.ZC_REGION_OF_PEAK of the peak), so current
# left out there (blanking, the duty ramp) deviates by less; more is current the converter
# drives: a spike, an overshoot or a reverse current
ZC_LIMIT_OF_RATED = metrics.ZC_REGION_OF_PEAK
OVERSHOOT_LIMIT = 0.05  # of vout, half-cycle mean, after the line returns
RECOVERY_BAND = 0.02  # of vout


@dataclass(frozen=True)
class Timing:
    """When the line came back (or the load stepped) and the recovery bound that applies."""

    back_s: float
    first_event_s: float
    bound_cycles: int
    freq_Hz: float
    line_return: bool = False  # the line came back after a dip (the overshoot bound applies)


def timing_of(prj: Project, s: Scenario) -> Timing:
    back, first, bound = settle_s(prj), math.inf, RECOVERY_CYCLES
    f = s.freq_Hz
    dip = False
    for ev in s.events:
        first = min(first, ev.t_s)
        if ev.kind == "dip":
            dip = True
            back = max(back, ev.t_s + ev.get("cycles") / f)
            if ev.get("residual") * s.vrms_V < prj.resolved.brownout_on_rms_V:
                bound = RESTART_CYCLES
        else:
            back = max(back, ev.t_s)
            if ev.kind == "freq":
                f = ev.get("hz")
    return Timing(back, first, bound, f, dip)


@dataclass
class Lane:
    """One lane's records (cut to its scenario's length) and what the checks need of it."""

    prj: Project
    scn: Scenario
    d: dict[str, np.ndarray]
    timing: Timing
    figures: dict[str, float] = field(default_factory=dict)

    @property
    def gates(self) -> np.ndarray:
        return self.d["gates"].astype(int)

    @property
    def modes(self) -> np.ndarray:
        return self.d["mode"].astype(int)


def legs(ln: Lane) -> str | None:
    per = ln.prj.resolved.pwm_period_counts
    both_slow = int(np.sum(ln.d["shoot_through"] > 0))
    if both_slow or np.any(ln.d["compare"] > per):
        return (
            f"{both_slow} periods with both slow-leg switches on, compare max "
            f"{ln.d['compare'].max():.0f}/{per}"
        )
    return None


def _controlled_current_A(ln: Lane) -> float:
    """The largest current the converter answers for: in a period its main switch conducts
    with the bus above the line (boosting), or flowing against the line voltage through a
    switch (only a switch lets the bus drive current back).  The line rectified into a bus
    below its peak is not: no gate pattern can stop it.  "The line" is the voltage the stage
    sees, the X capacitor's (``vterm_V``): after a line step it rings above the source's and,
    above the bus, drives current through the diodes whatever the gates do."""
    d, g, per = ln.d, ln.gates, ln.prj.resolved.pwm_period_counts
    pos_main = ((g & Gate.SLOW_LO) != 0) & ((g & Gate.FAST_LO) != 0) & (d["compare"] > 0)
    neg_main = ((g & Gate.SLOW_HI) != 0) & ((g & Gate.FAST_HI) != 0) & (d["compare"] < per)
    v_in = d["vterm_V"]
    boosting = (pos_main | neg_main) & (np.abs(v_in) < d["vbus_V"])
    il = np.maximum(np.abs(d["i_max_A"]), np.abs(d["i_min_A"]))
    reverse = np.where(v_in >= 0.0, -d["i_min_A"], d["i_max_A"])  # > 0: against the line
    ln.figures["il_peak_A"] = float(il.max())
    a = il[boosting].max() if boosting.any() else 0.0
    b = reverse[g != 0].max() if (g != 0).any() else 0.0
    return float(max(a, b))


def ov_oc(ln: Lane) -> str | None:
    r = ln.prj.resolved
    vmax = float(max(ln.d["vbus_V"].max(), ln.d["vbus_sample_V"].max()))
    il_ctl = _controlled_current_A(ln)
    ln.figures.update(vbus_max_V=vmax, il_peak_controlled_A=il_ctl)
    if vmax > r.ov_trip_V:
        return f"bus {vmax:.1f} V > ov_trip {r.ov_trip_V:.1f} V"
    if il_ctl > r.oc_trip_A:
        return (
            f"inductor {il_ctl:.1f} A > oc_trip {r.oc_trip_A:.1f} A while boosting or "
            "flowing against the line"
        )
    return None


def chatter(ln: Lane) -> str | None:
    """At most one change between slow-low-on and slow-high-on within each half cycle of the
    source as it is (a dip can shorten a half cycle: zeros continue the last sign)."""
    sgn = np.sign(ln.d["vs_V"])
    nz = np.nonzero(sgn)[0]
    if not len(nz):
        return None
    last = np.maximum(np.searchsorted(nz, np.arange(len(sgn)), side="right") - 1, 0)
    fill = sgn[nz[last]]
    seg = np.concatenate([[0], np.cumsum(fill[1:] != fill[:-1])])
    g = ln.gates
    slow = np.where(g & Gate.SLOW_LO, 1, np.where(g & Gate.SLOW_HI, -1, 0))
    idx = np.nonzero(slow)[0]
    if len(idx) <= 1:
        return None
    ch = idx[1:][np.diff(slow[idx]) != 0]
    if not len(ch):
        return None
    worst = int(np.bincount(seg[ch], minlength=seg[-1] + 1).max())
    return f"slow leg changed {worst} times within one half cycle" if worst > 1 else None


def recovery(ln: Lane) -> str | None:
    spec, tm, t = ln.prj.config.spec, ln.timing, ln.d["t_s"]
    final = ln.modes[-1]
    if final in (Mode.LATCHED, Mode.SENSOR_FAULT):
        return f"ended in mode {Mode(final).name.lower()} (latched)"
    smooth = metrics.half_cycle_mean(ln.d["vbus_V"], spec.fsw, tm.freq_Hz)
    after = t >= tm.back_s
    msg = None
    if tm.line_return and after.any():
        over = float((smooth[after].max() - spec.vout) / spec.vout)
        ln.figures["overshoot_after_return"] = over
        if over > OVERSHOOT_LIMIT:
            msg = f"bus {100 * over:.1f} % above vout after the line returned"
    tail = t >= tm.back_s + tm.bound_cycles / tm.freq_Hz
    if tail.any():
        dev = float(np.max(np.abs(smooth[tail] - spec.vout)) / spec.vout)
        ln.figures["bus_dev_after_bound"] = dev
        if dev > RECOVERY_BAND and msg is None:
            msg = f"bus {100 * dev:.1f} % off vout {tm.bound_cycles} cycles after the line returned"
    return msg


def zc_spike(ln: Lane) -> str | None:
    """Zero-crossing distortion in steady state before any event (three line cycles in RUN):
    the period-average line current's largest deviation from its fundamental where |v| is
    below a quarter of the line peak, as a fraction of the rated peak line current."""
    fs, f, t = ln.prj.config.spec.fsw, ln.scn.freq_Hz, ln.d["t_s"]
    t_ev = min(ln.timing.first_event_s, t[-1])
    n = int(round(3.0 * fs / f))
    k1 = int(np.searchsorted(t, t_ev))
    if k1 < n or np.any(ln.modes[k1 - n : k1] != Mode.RUN):
        return None
    vs, i = ln.d["vs_V"][k1 - n : k1], ln.d["i_avg_A"][k1 - n : k1]
    dev_A, frac = metrics.zero_crossing_distortion(vs, i, fs, f, ln.prj.sizing.iline_peak_A)
    ln.figures["zc_spike_A"], ln.figures["zc_spike_of_rated"] = dev_A, frac
    if frac > ZC_LIMIT_OF_RATED:
        return (
            f"zero-crossing distortion {dev_A:.2f} A = {100 * frac:.1f} % of the rated peak "
            f"line current (bound {100 * ZC_LIMIT_OF_RATED:g} %)"
        )
    return None


def sane(ln: Lane) -> str | None:
    bad = [key for key, a in ln.d.items() if not np.all(np.isfinite(a))]
    if bad:
        return f"non-finite {bad}"
    m = ln.modes
    edges = {(int(a), int(b)) for a, b in zip(m[:-1], m[1:], strict=True) if a != b}
    wrong = sorted(edges - {(int(a), int(b)) for a, b in MODE_EDGES})
    return f"mode edges not allowed: {wrong}" if wrong else None


INVARIANTS: dict[str, Callable[[Lane], str | None]] = {
    "legs": legs,
    "ov_oc": ov_oc,
    "chatter": chatter,
    "recovery": recovery,
    "zc_spike": zc_spike,
    "sane": sane,
}
BOUNDS = {
    "recovery_cycles": RECOVERY_CYCLES,
    "restart_cycles": RESTART_CYCLES,
    "recovery_band": RECOVERY_BAND,
    "zc_limit_of_rated": ZC_LIMIT_OF_RATED,
    "overshoot_limit": OVERSHOOT_LIMIT,
}


def check_lane(
    prj: Project, scn: Scenario, d: dict[str, np.ndarray], table: dict | None = None
) -> tuple[dict, dict]:
    """({invariant: message} of the violated ones, figures) for one lane's records, against
    ``table`` (default ``INVARIANTS``)."""
    n = int(round(scn.duration_s * prj.config.spec.fsw))
    ln = Lane(prj, scn, {key: a[:n] for key, a in d.items()}, timing_of(prj, scn))
    failed = {}
    for name, inv in (INVARIANTS if table is None else table).items():
        msg = inv(ln)
        if msg is not None:
            failed[name] = msg
    return failed, ln.figures
