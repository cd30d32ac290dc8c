"""Property-based fault campaigns: hypothesis draws cases, the closed loop runs them in
lockstep batches, invariants are checked on every lane, and failing cases are shrunk
(batched, one simplified parameter per lane) and saved as scenario files.

Invariants (each with its bound stated here and in the report):
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
  zc_spike    in steady state, the current near the zero crossings stays below
              ZC_SPIKE_LIMIT of the fundamental peak
  sane        no NaN or Inf in any record; supervisor modes change only along allowed edges
"""
from __future__ import annotations

import math
import multiprocessing as mp
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, Phase, given, settings, strategies as st

from . import metrics
from .loop import run
from .project import Project
from .scenario import Event, Scenario, dumps

RECOVERY_CYCLES = 10
RESTART_CYCLES = 20
ZC_SPIKE_LIMIT = 0.35
OVERSHOOT_LIMIT = 0.05  # of vout, half-cycle mean, after the line returns
SETTLE_S = 0.22  # start-up, soft start and the power-good load connection settle by then
INVARIANTS = ["legs", "ov_oc", "chatter", "recovery", "zc_spike", "sane"]
# IEC 61000-4-11 test levels (from memory): residual and duration in cycles (50 Hz, 60 Hz)
IEC_DIPS = [(0.0, 0.5, 0.5), (0.0, 1.0, 1.0), (0.4, 10.0, 12.0), (0.7, 25.0, 30.0), (0.8, 250.0, 300.0)]
IEC_INTERRUPTION = (0.0, 250.0, 300.0)

W, PRE, SOFT, RUN, LOSS, BROWN, TRIP, LATCH, SENS = range(9)
ALLOWED = {
    (W, PRE), (PRE, W), (PRE, SOFT), (SOFT, RUN), (SOFT, LOSS), (RUN, LOSS), (SOFT, BROWN), (RUN, BROWN),
    (SOFT, W), (RUN, W), (LOSS, SOFT), (LOSS, W), (BROWN, SOFT), (TRIP, W), (TRIP, LATCH),
} | {(m, TRIP) for m in range(7)} | {(m, LATCH) for m in range(7)} | {(m, SENS) for m in range(8)}


@dataclass(frozen=True)
class Case:
    """One drawn case (SI units); ``to_scenario`` gives the runnable scenario."""

    vrms_V: float
    freq_Hz: float
    load_kind: str
    load_frac: float
    h3: float = 0.0
    h3_deg: float = 0.0
    h5: float = 0.0
    h5_deg: float = 0.0
    noise_counts: tuple[float, float, float] = (0.0, 0.0, 0.0)
    offset_counts: tuple[float, float, float] = (0.0, 0.0, 0.0)
    gain_error: tuple[float, float, float] = (0.0, 0.0, 0.0)
    seed: int = 0
    event: str = "none"  # none, dip, load
    residual: float = 1.0
    cycles: float = 0.0
    event_deg: float = 0.0
    load_to_frac: float = 1.0

    def event_time_s(self) -> float:
        k = math.ceil(SETTLE_S * self.freq_Hz)
        return (k + self.event_deg / 360.0) / self.freq_Hz

    def line_back_s(self) -> float:
        return self.event_time_s() + (self.cycles / self.freq_Hz if self.event == "dip" else 0.0)

    def to_scenario(self, prj: Project, name: str = "case") -> Scenario:
        spec = prj.config.spec
        derate = min(1.0, self.vrms_V / spec.vin_rms_min)  # rated power only from vin_rms_min up
        p = self.load_frac * spec.power * derate
        t_ev = self.event_time_s()
        events: tuple[Event, ...] = ()
        if self.event == "dip":
            events = (Event(t_ev, "dip", (("residual", self.residual), ("cycles", self.cycles))),)
        elif self.event == "load":
            events = (Event(t_ev, "load", (("power", self.load_to_frac * spec.power * derate),)),)
        cycles = (RESTART_CYCLES if _restart_expected(prj, self) else RECOVERY_CYCLES) if self.event != "none" else 4
        duration = self.line_back_s() + (cycles + 2) / self.freq_Hz
        harm = tuple(h for h in ((3, self.h3, self.h3_deg), (5, self.h5, self.h5_deg)) if h[1] > 0)
        return Scenario(duration_s=duration, vrms_V=self.vrms_V, freq_Hz=self.freq_Hz, load_kind=self.load_kind,
                        load_power_W=p, harmonics=harm, events=events, noise_counts=self.noise_counts,
                        gain_error=self.gain_error, offset_counts=self.offset_counts, seed=self.seed, name=name)


LINE_MARGIN = 1.03  # lowest line drawn: this much above the brown-out restart level (estimator and sensor errors)


def line_ranges(prj: Project) -> tuple[tuple[float, float], tuple[float, float]]:
    """The lines a design must run on, (Vrms range, Hz range): from just above its brown-out
    restart level (power derated below ``vin_rms_min``) to its rated ``vin_rms_max``, over its
    accepted frequency band.  A line beyond them is for the protection to refuse, not a case
    whose recovery the campaign may demand."""
    pr = prj.config.protection
    return (LINE_MARGIN * prj.resolved.brownout_on_rms_V, prj.config.spec.vin_rms_max), (pr.freq_min, pr.freq_max)


def case_strategy(max_event_cycles: float = 12.0, vrms_range=(85.0, 265.0), freq_range=(45.0, 66.0)):
    """Line over ``vrms_range`` (Vrms) and ``freq_range`` (Hz), grid distortion, sensor noise
    (<= 1.5 codes rms), offsets (<= 3 codes), gain errors (<= 1 %), load 10..100 %,
    IEC 61000-4-11 dips and interruptions at any phase (durations capped at
    ``max_event_cycles`` for bounded campaigns), load steps."""
    fl = dict(allow_nan=False, allow_infinity=False)
    triple = lambda lo, hi: st.tuples(*(st.floats(lo, hi, **fl) for _ in range(3)))  # noqa: E731

    @st.composite
    def draw(d):
        f = d(st.floats(*freq_range, **fl))
        ev = d(st.sampled_from(["none", "dip", "dip", "dip", "load"]))
        res, cyc = 1.0, 0.0
        if ev == "dip":
            level = d(st.sampled_from(IEC_DIPS + [IEC_INTERRUPTION]))
            res = level[0]
            cyc = min(level[1] if f < 55.0 else level[2], max_event_cycles)
        return Case(
            vrms_V=d(st.floats(*vrms_range, **fl)), freq_Hz=f,
            load_kind=d(st.sampled_from(["resistive", "constant_power"])), load_frac=d(st.floats(0.1, 1.0, **fl)),
            h3=d(st.floats(0.0, 0.04, **fl)), h3_deg=d(st.floats(0.0, 360.0, **fl)),
            h5=d(st.floats(0.0, 0.03, **fl)), h5_deg=d(st.floats(0.0, 360.0, **fl)),
            noise_counts=d(triple(0.0, 1.5)), offset_counts=d(triple(-3.0, 3.0)), gain_error=d(triple(-0.01, 0.01)),
            seed=d(st.integers(0, 2**32 - 1)), event=ev, residual=res, cycles=cyc,
            event_deg=d(st.floats(0.0, 360.0, **fl)), load_to_frac=d(st.floats(0.1, 1.0, **fl)),
        )

    return draw()


def draw_cases(n: int, seed: int, max_event_cycles: float = 12.0, vrms_range=(85.0, 265.0),
               freq_range=(45.0, 66.0)) -> list[Case]:
    """``n`` cases drawn by hypothesis, reproducibly from ``seed`` (groups of ``GROUP`` cases
    per hypothesis example, so each example stays within hypothesis's size budget)."""
    from hypothesis import seed as hseed

    out: list[Case] = []
    strat = case_strategy(max_event_cycles, vrms_range, freq_range)
    group = 8

    # hypothesis opens with its simplest example (the same case drawn over and over, which the
    # de-duplication drops): ask for a few more examples than the count alone needs
    @settings(max_examples=n // group + 10, database=None, phases=[Phase.generate], deadline=None,
              suppress_health_check=list(HealthCheck))
    @given(st.data())
    def collect(data):
        for _ in range(group):
            c = data.draw(strat)
            if c not in seen:
                seen.add(c)
                out.append(c)

    seen: set[Case] = set()
    rounds = 0
    while len(out) < n and rounds < 20:  # hypothesis may stop a round early: go on with the next seed
        hseed(seed * 1000 + rounds)(collect)()
        rounds += 1
    if len(out) < n:
        raise RuntimeError(f"hypothesis produced {len(out)} of {n} cases")
    return out[:n]


@dataclass
class Verdict:
    case: Case | Scenario
    failed: dict[str, str] = field(default_factory=dict)
    figures: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.failed


def _restart_expected(prj: Project, c: Case) -> bool:
    """A dip whose residual line is below the brown-out restart level stops the stage."""
    return c.event == "dip" and c.residual * c.vrms_V < prj.resolved.brownout_on_rms_V


@dataclass(frozen=True)
class Timing:
    """When the line came back (or the load stepped) and the recovery bound that applies."""

    back_s: float
    first_event_s: float
    bound_cycles: int
    freq_Hz: float
    line_return: bool = False  # the line came back after a dip (the overshoot bound applies)


def timing_of(prj: Project, s: Scenario) -> Timing:
    back, first, bound = SETTLE_S, math.inf, RECOVERY_CYCLES
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


def check(prj: Project, res, k: int, c: Case | Scenario) -> Verdict:
    """Every invariant on lane ``k`` of a run of case (or scenario) ``c``."""
    scn = c.to_scenario(prj) if isinstance(c, Case) else c
    v = Verdict(c)
    d = res.lane(k)
    spec = prj.config.spec
    r = prj.resolved
    fs = spec.fsw
    per = prj.resolved.pwm_period_counts
    tm = timing_of(prj, scn)
    n = int(round(scn.duration_s * fs))
    d = {key: a[:n] for key, a in d.items()}
    t = d["t_s"]
    # legs
    both_slow = np.sum(d["shoot_through"] > 0)
    if both_slow or np.any(d["compare"] > per):
        v.failed["legs"] = f"{both_slow} periods with both slow-leg switches on, compare max {d['compare'].max():.0f}/{per}"
    # ov_oc
    vmax = max(d["vbus_V"].max(), d["vbus_sample_V"].max())
    # current the converter is answerable for: in a period its main switch conducts with the
    # bus above the line (boosting), or flowing against the line voltage through a switch
    # (only a switch lets the bus drive current back). The line rectified into a bus below
    # its peak, through a body diode or a synchronous switch standing in for it, is not: no
    # gate pattern can stop it, and it decays at (v_bus - |v|)/L once the bus is above the line.
    g = d["gates"].astype(int)
    main_on = ((((g & 4) != 0) & ((g & 1) != 0) & (d["compare"] > 0))
               | (((g & 8) != 0) & ((g & 2) != 0) & (d["compare"] < per)))
    boosting = main_on & (np.abs(d["vs_V"]) < d["vbus_V"])
    il = np.maximum(np.abs(d["i_max_A"]), np.abs(d["i_min_A"]))
    reverse = np.where(d["vs_V"] >= 0.0, -d["i_min_A"], d["i_max_A"])  # > 0: against the line voltage
    il_ctl = max(il[boosting].max() if boosting.any() else 0.0, reverse[g != 0].max() if (g != 0).any() else 0.0)
    v.figures.update(vbus_max_V=float(vmax), il_peak_controlled_A=float(il_ctl), il_peak_A=float(il.max()))
    if vmax > r.ov_trip_V:
        v.failed["ov_oc"] = f"bus {vmax:.1f} V > ov_trip {r.ov_trip_V:.1f} V"
    elif il_ctl > r.oc_trip_A:
        v.failed["ov_oc"] = (f"inductor {il_ctl:.1f} A > oc_trip {r.oc_trip_A:.1f} A while boosting or flowing "
                             f"against the line")
    half = fs / (2.0 * scn.freq_Hz)
    # chatter: at most one change between slow-low-on and slow-high-on within each half cycle
    # of the source as it is (a dip can shorten a half cycle: zeros continue the last sign)
    sgn = np.sign(d["vs_V"])
    nz = np.nonzero(sgn)[0]
    if len(nz):
        fill = sgn[nz[np.maximum(np.searchsorted(nz, np.arange(len(sgn)), side="right") - 1, 0)]]
        seg = np.concatenate([[0], np.cumsum(fill[1:] != fill[:-1])])
        slow = np.where(d["gates"].astype(int) & 4, 1, np.where(d["gates"].astype(int) & 8, -1, 0))
        idx = np.nonzero(slow)[0]
        if len(idx) > 1:
            ch = idx[1:][np.diff(slow[idx]) != 0]
            per_seg = np.bincount(seg[ch], minlength=seg[-1] + 1) if len(ch) else np.zeros(1, int)
            if per_seg.max() > 1:
                v.failed["chatter"] = f"slow leg changed {per_seg.max()} times within one half cycle"
    # recovery and latching
    modes = d["mode"].astype(int)
    if modes[-1] in (LATCH, SENS):
        v.failed["recovery"] = f"ended in mode {modes[-1]} (latched)"
    else:
        smooth = metrics.half_cycle_mean(d["vbus_V"], fs, tm.freq_Hz)
        after = t >= tm.back_s
        if tm.line_return and after.any():
            over = (smooth[after].max() - spec.vout) / spec.vout
            v.figures["overshoot_after_return"] = float(over)
            if over > OVERSHOOT_LIMIT:
                v.failed["recovery"] = f"bus {100 * over:.1f} % above vout after the line returned"
        tail = t >= tm.back_s + tm.bound_cycles / tm.freq_Hz
        if tail.any():
            dev = np.max(np.abs(smooth[tail] - spec.vout)) / spec.vout
            v.figures["bus_dev_after_bound"] = float(dev)
            if dev > 0.02 and "recovery" not in v.failed:
                v.failed["recovery"] = f"bus {100 * dev:.1f} % off vout {tm.bound_cycles} cycles after the line returned"
    # zero-crossing spike, steady state before any event
    t_ev = min(tm.first_event_s, t[-1])
    pre = (t >= t_ev - 3.0 / scn.freq_Hz) & (t < t_ev) & (modes == RUN)
    if pre.sum() > 2 * half:
        q = metrics.power_quality(d["vs_V"][pre], d["i_avg_A"][pre], fs, scn.freq_Hz)
        spike = metrics.zero_crossing_spike(d["vs_V"][pre], d["i_avg_A"][pre], 2 * r.zc_blank_V, q["harmonics_A"][0])
        v.figures["zc_spike_ratio"] = spike
        if spike > ZC_SPIKE_LIMIT:
            v.failed["zc_spike"] = f"zero-crossing current {100 * spike:.0f} % of the fundamental peak"
    # sane
    bad = [key for key, a in d.items() if not np.all(np.isfinite(a))]
    edges = {(a, b) for a, b in zip(modes[:-1], modes[1:]) if a != b}
    wrong = sorted(edges - ALLOWED)
    if bad or wrong:
        v.failed["sane"] = f"non-finite {bad}" if bad else f"mode edges not allowed: {wrong}"
    return v


def run_cases(prj: Project, cases: list, model: str = "switching", built=None) -> list[Verdict]:
    """Run cases (or scenarios) in one lockstep batch and check each."""
    scns = [c.to_scenario(prj, f"case{k}") if isinstance(c, Case) else c for k, c in enumerate(cases)]
    res = run(prj, scns, model=model, progress=False, built=built)
    return [check(prj, res, k, c) for k, c in enumerate(cases)]


# -- shrinking -----------------------------------------------------------------------------------
def _simpler(prj: Project, c: Case) -> list[Case]:
    spec = prj.config.spec
    cands = []
    z3 = (0.0, 0.0, 0.0)
    for name, simple in (("noise_counts", z3), ("offset_counts", z3), ("gain_error", z3), ("h3", 0.0), ("h5", 0.0),
                         ("load_kind", "resistive"), ("event_deg", 90.0), ("event_deg", 0.0), ("seed", 0),
                         ("freq_Hz", spec.line_freq), ("vrms_V", spec.vin_rms_nominal), ("load_frac", 1.0),
                         ("load_frac", round(c.load_frac, 1)), ("vrms_V", round(c.vrms_V)),
                         ("freq_Hz", round(c.freq_Hz)), ("event_deg", round(c.event_deg / 15.0) * 15.0)):
        if getattr(c, name) != simple:
            cands.append(replace(c, **{name: simple}))
    if c.event == "dip" and c.cycles > 0.5:
        cands.append(replace(c, cycles=max(0.5, round(c.cycles / 2.0 * 2) / 2)))
    return cands


def shrink(prj: Project, c: Case, invariant: str, rounds: int = 8, log=None) -> Case:
    """Simplify ``c`` while ``invariant`` still fails: each round runs every one-parameter
    simplification in one batch and keeps the first that still fails."""
    for _ in range(rounds):
        cands = _simpler(prj, c)
        if not cands:
            break
        verdicts = run_cases(prj, cands)
        keep = next((vd.case for vd in verdicts if invariant in vd.failed), None)
        if keep is None:
            break
        if log:
            log(f"  shrink: kept {_diff(c, keep)}")
        c = keep
    return c


def _diff(a: Case, b: Case) -> str:
    da, db = asdict(a), asdict(b)
    return ", ".join(f"{k}={db[k]!r}" for k in da if da[k] != db[k])


# -- campaign ------------------------------------------------------------------------------------
def _worker(args):
    cfg, cases = args
    from .project import from_config

    prj = from_config(cfg)
    return run_cases(prj, cases)


@dataclass
class CampaignResult:
    verdicts: list[Verdict]
    wall_s: float
    saved: list[Path]
    shrunk: list[Case]

    def counts(self) -> dict[str, int]:
        return {inv: sum(1 for v in self.verdicts if inv in v.failed) for inv in INVARIANTS}

    @property
    def ok(self) -> bool:
        return all(v.ok for v in self.verdicts)


def campaign(prj: Project, n: int, seed: int = 0, workers: int = 1, batch: int = 128, out_dir=None,
             max_event_cycles: float = 12.0, do_shrink: bool = True, log=print, built=None) -> CampaignResult:
    t0 = time.perf_counter()
    vrms_range, freq_range = line_ranges(prj)
    cases = draw_cases(n, seed, max_event_cycles, vrms_range, freq_range)
    chunks = [cases[i:i + batch] for i in range(0, len(cases), batch)]
    verdicts: list[Verdict] = []
    log(f"fuzz: {n} cases in {len(chunks)} batch(es) of <= {batch}, {workers} worker(s), seed {seed}; line "
        f"{vrms_range[0]:.1f}..{vrms_range[1]:.1f} Vrms, {freq_range[0]:g}..{freq_range[1]:g} Hz")
    if workers > 1 and len(chunks) > 1:
        ctx = mp.get_context("fork")
        with ctx.Pool(workers) as pool:
            for k, vs in enumerate(pool.imap(_worker, [(prj.config, ch) for ch in chunks])):
                verdicts += vs
                log(f"  batch {k + 1}/{len(chunks)} done, {sum(not v.ok for v in verdicts)} failing so far, "
                    f"{time.perf_counter() - t0:.0f} s")
    else:
        for k, ch in enumerate(chunks):
            verdicts += run_cases(prj, ch, built=built)
            log(f"  batch {k + 1}/{len(chunks)} done, {sum(not v.ok for v in verdicts)} failing so far, "
                f"{time.perf_counter() - t0:.0f} s")
    saved, shrunk = [], []
    failing = [v for v in verdicts if not v.ok]
    if failing and out_dir is not None:
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        for j, v in enumerate(failing[:5]):
            inv = next(iter(v.failed))
            c = shrink(prj, v.case, inv, log=log) if do_shrink else v.case
            shrunk.append(c)
            path = out / f"fail_{inv}_{seed}_{j}.toml"
            text = f"# pfcrig fuzz: invariant '{inv}' failed: {v.failed[inv]}\n" + dumps(c.to_scenario(prj, path.stem))
            path.write_text(text)
            saved.append(path)
            log(f"  saved {path}")
    return CampaignResult(verdicts, time.perf_counter() - t0, saved, shrunk)
