"""Property-based fault campaigns: hypothesis draws cases (``campaigns.cases``), the closed
loop runs them in lockstep batches, every lane is checked against the invariants
(``campaigns.invariants``), and failing cases are shrunk (batched, one simplified parameter
per lane) and saved as scenario files.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from codegen.files import atomic_path
from design.project import Project, from_config
from harness.closedloop.loop import RunResult, run
from harness.closedloop.scenario import Scenario, dumps
from plant.sensor_faults import channel_names

from .cases import Case, draw_cases, line_ranges, settle_s
from .invariants import INVARIANTS, check_lane
from .pool import batch_map, progress_line, where
from .results import Recorder, collect
from .safety import SAFETY_INVARIANTS


@dataclass
class Verdict:
    case: Case | Scenario
    failed: dict[str, str] = field(default_factory=dict)
    figures: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.failed


def check(prj: Project, res: RunResult, k: int, c: Case | Scenario) -> Verdict:
    """Every invariant on lane ``k`` of a run of case (or scenario) ``c``."""
    scn = c.to_scenario(prj) if isinstance(c, Case) else c
    sensor = any(ev.kind == "sensor" for ev in scn.events)  # a failed sensor: single-fault ones
    failed, figures = check_lane(prj, scn, res.lane(k), SAFETY_INVARIANTS if sensor else None)
    return Verdict(c, failed, figures)


def run_cases(
    prj: Project, cases: list, model: str = "switching", built: Any = None
) -> list[Verdict]:
    """Run cases (or scenarios) in one lockstep batch and check each."""
    scns = [
        c.to_scenario(prj, f"case{k}") if isinstance(c, Case) else c for k, c in enumerate(cases)
    ]
    res = run(prj, scns, model=model, progress=False, built=built)
    return [check(prj, res, k, c) for k, c in enumerate(cases)]


# -- shrinking -----------------------------------------------------------------------------------
def _simpler(prj: Project, c: Case) -> list[Case]:
    spec = prj.config.spec
    cands = []
    z3 = (0.0, 0.0, 0.0)
    for name, simple in (
        ("noise_counts", z3),
        ("offset_counts", z3),
        ("gain_error", z3),
        ("h3", 0.0),
        ("h5", 0.0),
        ("load_kind", "resistive"),
        ("event_deg", 90.0),
        ("event_deg", 0.0),
        ("seed", 0),
        ("freq_Hz", spec.line_freq),
        ("vrms_V", spec.vin_rms_nominal),
        ("load_frac", 1.0),
        ("load_frac", round(c.load_frac, 1)),
        ("vrms_V", round(c.vrms_V)),
        ("freq_Hz", round(c.freq_Hz)),
        ("event_deg", round(c.event_deg / 15.0) * 15.0),
    ):
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
def _worker(args: tuple) -> list[Verdict]:
    cfg, cases = args
    prj = from_config(cfg)
    return run_cases(prj, cases)


@dataclass
class CampaignResult:
    verdicts: list[Verdict]
    wall_s: float
    saved: list[Path]
    shrunk: list[Case]
    sensor_faults: bool = False

    def counts(self) -> dict[str, int]:
        return {inv: sum(1 for v in self.verdicts if inv in v.failed) for inv in self.names}

    @property
    def names(self) -> list[str]:
        """The invariants the cases were checked against (in a campaign with sensor faults,
        the single-fault ones)."""
        return list(SAFETY_INVARIANTS if self.sensor_faults else INVARIANTS)

    @property
    def ok(self) -> bool:
        return all(v.ok for v in self.verdicts)


def passive_surges(verdicts: list[Verdict], limit_A: float) -> list[dict]:
    """The cases whose inductor current (``il_peak_A``, controlled or not) passed the device
    limit in A without an invariant failing: the passive surge of the line rectified into a
    bus below its peak, which ``ov_oc`` leaves out (no gate pattern stops it)."""
    return [
        {"case_index": k, "il_peak_A": v.figures["il_peak_A"]}
        for k, v in enumerate(verdicts)
        if v.ok and v.figures.get("il_peak_A", 0.0) > limit_A
    ]


def save_surges(
    prj: Project, verdicts: list[Verdict], surges: list[dict], out_dir, most: int = 5
) -> list[Path]:
    """The scenario files of up to ``most`` of the ``surges`` (``passive_surges``), largest
    first, as ``out_dir/surge_<case>.toml``: cases that pass, so not saved as failing ones."""
    out, paths = Path(out_dir), []
    out.mkdir(parents=True, exist_ok=True)
    for s in sorted(surges, key=lambda s: -s["il_peak_A"])[:most]:
        k = s["case_index"]
        path = out / f"surge_{k}.toml"
        c = verdicts[k].case
        scn = c.to_scenario(prj, path.stem) if isinstance(c, Case) else c
        text = (
            f"# pfcrig fuzz: case {k} passed, but drove {s['il_peak_A']:.1f} A through the "
            "inductor, past the device limit, as current no gate pattern stops\n" + dumps(scn)
        )
        with atomic_path(path) as tmp:
            tmp.write_text(text)
        paths.append(path)
    return paths


def campaign(
    prj: Project,
    n: int,
    seed: int = 0,
    workers: int = 1,
    batch: int = 128,
    out_dir=None,
    max_event_cycles: float = 12.0,
    do_shrink: bool = True,
    log=print,
    built=None,
    sensor_faults: bool = False,
    recorder: Recorder | None = None,
    scheduler: str | None = None,
) -> CampaignResult:
    """``sensor_faults``: every case also fails one sensor (``cases.sensor_fault_of``) and is
    checked against the single-fault invariants (``campaigns.safety``).  ``recorder``: each
    batch's cases are committed to the results database as the batch finishes, and the cases
    it already holds (a resumed campaign) are not run again.  Batches run on Dask
    (``pool.batch_map``: an embedded cluster of ``workers`` processes, or the cluster at
    ``scheduler``); cases are drawn and shrunk here, on the client."""
    t0 = time.perf_counter()
    vrms_range, freq_range = line_ranges(prj)
    full = prj.resolved.adc_full_counts if sensor_faults else 0
    names = channel_names(prj.resolved.line_split)
    cases = draw_cases(
        n, seed, max_event_cycles, vrms_range, freq_range, full, settle_s(prj), names
    )
    done = recorder.done() if recorder else {}
    by_idx = {i: Verdict(cases[i], *done[i]) for i in done if i < len(cases)}
    todo = [i for i in range(len(cases)) if i not in by_idx]
    chunks = [todo[i : i + batch] for i in range(0, len(todo), batch)]
    log(
        f"fuzz: {n} cases in {len(chunks)} batch(es) of <= {batch}, on "
        f"{where(workers, scheduler)}, seed {seed}; line "
        f"{vrms_range[0]:.1f}..{vrms_range[1]:.1f} Vrms, {freq_range[0]:g}..{freq_range[1]:g} Hz"
        + (f"; {len(by_idx)} already in the results database" if by_idx else "")
    )
    jobs = [[cases[i] for i in ch] for ch in chunks]
    results = batch_map(
        _worker,
        [(prj.config, job) for job in jobs],
        workers,
        scheduler,
        local=lambda j: run_cases(prj, j[1], built=built),
    )

    def rows(idx: list[int], vs: list[Verdict]) -> list:
        return [
            (i, dumps(cases[i].to_scenario(prj, f"case{i}")), v.failed, v.figures)
            for i, v in zip(idx, vs, strict=True)
        ]

    def progress(k: int) -> None:
        bad = sum(not v.ok for v in by_idx.values())
        log(progress_line(k, len(chunks), len(by_idx), n, "cases", f"{bad} failing so far", t0))

    collect(results, chunks, by_idx, recorder, rows, progress)
    verdicts = [by_idx[i] for i in range(len(cases))]
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
            text = f"# pfcrig fuzz: invariant '{inv}' failed: {v.failed[inv]}\n" + dumps(
                c.to_scenario(prj, path.stem)
            )
            with atomic_path(path) as tmp:
                tmp.write_text(text)
            saved.append(path)
            log(f"  saved {path}")
    return CampaignResult(verdicts, time.perf_counter() - t0, saved, shrunk, sensor_faults)
