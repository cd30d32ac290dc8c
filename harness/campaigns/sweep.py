"""Operating-range sweeps: a grid of steady operating points (line voltage x load x line
frequency), each a closed-loop switching run of the generated C from start-up to its steady
window, with the figures a design is signed off on at each point."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from design.project import Project, from_config
from harness.closedloop.loop import run
from harness.closedloop.report import lane_report
from harness.closedloop.scenario import Scenario, dumps

from .pool import batch_map, progress_line, where
from .results import Recorder, collect

GRID_STEPS = 8  # line voltages across the design's range by default
DEFAULT_LOADS_PCT = (10.0, 20.0, 50.0, 75.0, 100.0)  # of rated output power
LANDMARK_VRMS = (115.0, 230.0)  # the common nominal lines, placed on the grid when in range
DEFAULT_DURATION_S = 0.6  # start-up plus at least one IEC 61000-4-7 window on the examples

# per point: the figures of the steady window (None where there is none) ...
STEADY_FIGURES = (
    "pf",
    "thd_i",
    "thd_total",
    "displacement_factor",
    "efficiency",
    "p_in_W",
    "p_out_W",
    "losses_W",
    "vbus_mean_V",
    "vbus_ripple_pp_V",
    "il_peak_A",
    "zc_spike_A",
    "zc_spike_of_rated",
    "class_a_applicable",
    "class_a_reason",
    "class_a_pass",
    "class_a_worst_h",
    "class_a_worst_ratio",
    "losses_not_modelled",
)


@dataclass(frozen=True)
class Point:
    """One operating point: line rms (V), load as a fraction of rated power, line Hz."""

    vrms_V: float
    load_frac: float
    freq_Hz: float


def default_vrms(prj: Project) -> tuple[float, ...]:
    """``GRID_STEPS`` line voltages evenly over [vin_rms_min, vin_rms_max], the nearest inner
    step moved onto 115 V and 230 V where they lie in the range (V rms)."""
    spec = prj.config.spec
    vals = list(np.round(np.linspace(spec.vin_rms_min, spec.vin_rms_max, GRID_STEPS), 1))
    for mark in LANDMARK_VRMS:
        if spec.vin_rms_min <= mark <= spec.vin_rms_max and mark not in vals:
            inner = range(1, len(vals) - 1)
            j = min(inner, key=lambda i: abs(vals[i] - mark))
            vals[j] = mark
    return tuple(sorted(set(float(v) for v in vals)))


def check_grid(prj: Project, vrms: tuple[float, ...], freqs: tuple[float, ...]) -> list[str]:
    """Why a grid cannot be swept on this design (empty: it can).  A line outside the
    design's rated range or frequency band is for the protection to refuse, not a steady
    operating point."""
    spec, pr = prj.config.spec, prj.config.protection
    errs = [
        f"--vrms {v:g} V is outside the design's line range {spec.vin_rms_min:g}.."
        f"{spec.vin_rms_max:g} V rms"
        for v in vrms
        if not spec.vin_rms_min <= v <= spec.vin_rms_max
    ]
    errs += [
        f"--freq {f:g} Hz is outside the accepted band {pr.freq_min:g}..{pr.freq_max:g} Hz"
        for f in freqs
        if not pr.freq_min <= f <= pr.freq_max
    ]
    return errs


def grid(
    vrms: tuple[float, ...], loads_frac: tuple[float, ...], freqs: tuple[float, ...]
) -> list[Point]:
    """Every combination, frequency slowest, then line voltage, then load."""
    return [Point(v, ld, f) for f in freqs for v in vrms for ld in loads_frac]


def scenario_of(prj: Project, p: Point, load_kind: str, duration_s: float) -> Scenario:
    """The steady run of one point: the line and load from t = 0, no events."""
    return Scenario(
        duration_s=duration_s,
        vrms_V=p.vrms_V,
        freq_Hz=p.freq_Hz,
        load_kind=load_kind,
        load_power_W=p.load_frac * prj.config.spec.power,
        name=f"sweep_{p.vrms_V:g}V_{100 * p.load_frac:g}pct_{p.freq_Hz:g}Hz",
    )


def point_record(p: Point, load_kind: str, rep: dict) -> dict:
    """The JSON record of one point from its run's report."""
    rec: dict = {
        "vrms_V": p.vrms_V,
        "load_frac": p.load_frac,
        "freq_Hz": p.freq_Hz,
        "load_kind": load_kind,
        "steady": rep["steady"],
        "steady_reason": rep["steady_reason"],
        "window_s": rep["window_s"],
    }
    rec.update({k: rep[k] for k in STEADY_FIGURES})
    wr = rep["whole_run"]
    rec["final_mode"] = wr["final_mode"]
    rec["faults_seen"] = wr["faults_seen"]
    rec["scenario"] = rep["scenario"]
    return rec


def run_points(prj: Project, points: list[Point], load_kind: str, duration_s: float) -> list[dict]:
    """One lockstep batch: every point a lane, each its record."""
    scns = [scenario_of(prj, p, load_kind, duration_s) for p in points]
    res = run(prj, scns, model="switching", progress=False)
    return [point_record(p, load_kind, lane_report(res, k)) for k, p in enumerate(points)]


def _worker(args: tuple) -> list[dict]:
    cfg, points, load_kind, duration_s = args
    return run_points(from_config(cfg), points, load_kind, duration_s)


def sweep(
    prj: Project,
    points: list[Point],
    load_kind: str = "resistive",
    duration_s: float = DEFAULT_DURATION_S,
    batch: int = 8,
    workers: int = 1,
    log: Callable[[str], None] = print,
    recorder: Recorder | None = None,
    scheduler: str | None = None,
) -> tuple[list[dict], float]:
    """Every point's record, in the grid's order, and the wall time (s).  ``recorder``: each
    batch's points are committed to the results database as it finishes (verdict: a steady
    window found), and the points it already holds (a resumed sweep) are not run again."""
    t0 = time.perf_counter()
    done = recorder.done() if recorder else {}
    by_idx = {i: done[i][1] for i in done if i < len(points)}
    todo = [i for i in range(len(points)) if i not in by_idx]
    chunks = [todo[i : i + batch] for i in range(0, len(todo), batch)]
    log(
        f"sweep: {len(points)} points in {len(chunks)} batch(es) of <= {batch}, "
        f"on {where(workers, scheduler)}, {duration_s:g} s each, {load_kind} load"
        + (f"; {len(by_idx)} already in the results database" if by_idx else "")
    )
    jobs = [[points[i] for i in ch] for ch in chunks]
    results = batch_map(
        _worker,
        [(prj.config, job, load_kind, duration_s) for job in jobs],
        workers,
        scheduler,
        local=lambda j: run_points(prj, j[1], load_kind, duration_s),
    )

    def rows(idx: list[int], recs: list[dict]) -> list:
        return [
            (
                i,
                dumps(scenario_of(prj, points[i], load_kind, duration_s)),
                {} if r["steady"] else {"steady": r["steady_reason"]},
                r,
            )
            for i, r in zip(idx, recs, strict=True)
        ]

    def progress(k: int) -> None:
        tally = f"{sum(not r['steady'] for r in by_idx.values())} not steady"
        log(progress_line(k, len(chunks), len(by_idx), len(points), "points", tally, t0))

    collect(results, chunks, by_idx, recorder, rows, progress)
    return [by_idx[i] for i in range(len(points))], time.perf_counter() - t0
