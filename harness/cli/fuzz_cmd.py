"""``pfcrig fuzz``: a property-based fault campaign in closed loop."""

from __future__ import annotations

import argparse
import sys
from dataclasses import asdict
from pathlib import Path

from design.project import load_project
from harness.campaigns import fuzz
from harness.campaigns.invariants import BOUNDS

from . import checks, html_pages
from .output import write_json
from .results_cmd import add_db_options, open_recorder
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("fuzz", help="property-based fault campaign in closed loop")
    q.add_argument("config")
    q.add_argument(
        "--examples",
        type=checks.number(int, 1, 1_000_000),
        default=200,
        metavar="N",
        help="cases to draw (default 200)",
    )
    checks.add_seed(q)
    checks.add_workers(q, "one batch at a time each")
    q.add_argument(
        "--batch",
        type=checks.number(int, 1, 4096),
        default=128,
        metavar="B",
        help="cases per lockstep batch (default 128)",
    )
    q.add_argument(
        "--max-event-cycles",
        type=checks.number(float, 0.5, 300.0),
        default=12.0,
        metavar="C",
        help="cap on dip/interruption length in line cycles (IEC 61000-4-11 goes to 250/300)",
    )
    q.add_argument(
        "--out",
        default="fuzz_failures",
        metavar="DIR",
        help="where failing cases are saved as scenarios",
    )
    q.add_argument("--no-shrink", action="store_true", help="save failing cases as drawn")
    q.add_argument(
        "--sensor-faults",
        action="store_true",
        help="fail one sensor in every case (stuck, offset, gain, glitch, open; any channel, "
        "phase and mode) and check the single-fault invariants",
    )
    q.add_argument("--json", metavar="OUT", help="write the campaign report as JSON")
    q.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    add_db_options(q)
    checks.add_cluster_options(q)
    q.set_defaults(func=fuzz_cmd)


def fuzz_cmd(args: argparse.Namespace) -> int:
    checks.output_dir(args.out, "--out")
    checks.output_file(args.json, "--json")
    checks.output_file(args.html, "--html")
    prj = load_project(args.config)
    out_dir = Path(args.out)
    params = {
        "examples": args.examples,
        "seed": args.seed,
        "max_event_cycles": args.max_event_cycles,
        "sensor_faults": args.sensor_faults,
    }
    rec = open_recorder(args, "fuzz", prj, params, args.examples)
    res = fuzz.campaign(
        prj,
        args.examples,
        seed=args.seed,
        workers=args.workers,
        batch=args.batch,
        out_dir=out_dir,
        max_event_cycles=args.max_event_cycles,
        do_shrink=not args.no_shrink,
        log=lambda m: print(m, file=sys.stderr),
        sensor_faults=args.sensor_faults,
        recorder=rec,
        scheduler=args.scheduler,
    )
    counts = res.counts()
    rows = [(inv, len(res.verdicts) - counts[inv], counts[inv]) for inv in res.names]
    print(format_table(["invariant", "held", "violated"], rows))
    print(
        f"{len(res.verdicts)} cases, {sum(not v.ok for v in res.verdicts)} failing, "
        f"{res.wall_s:.1f} s"
    )
    print(
        f"results: campaign {rec.campaign_id} in {args.db} (pfcrig results show {rec.campaign_id})"
    )
    for p in res.saved:
        print(f"failing case: {p}  (replay: pfcrig run {args.config} --scenario {p})")
    surges = fuzz.passive_surges(res.verdicts, prj.resolved.device_current_A)
    if surges:
        worst = max(surges, key=lambda s: s["il_peak_A"])
        print(
            f"warning: {len(surges)} case(s) drove more than the device limit "
            f"{prj.resolved.device_current_A:.1f} A through the inductor as current no gate "
            f"pattern stops (the line rectified into a bus under its peak), worst "
            f"{worst['il_peak_A']:.1f} A in case {worst['case_index']}; no invariant holds "
            "this (README: 'Known limitation: the rectified surge')",
            file=sys.stderr,
        )
        for s in fuzz.save_surges(prj, res.verdicts, surges, out_dir):
            print(f"surge case: {s}  (replay: pfcrig run {args.config} --scenario {s})")
    if args.json:
        doc = {
            "cases": len(res.verdicts),
            "counts": counts,
            "wall_s": res.wall_s,
            "seed": args.seed,
            "bounds": {**BOUNDS, "max_event_cycles": args.max_event_cycles},
            "failures": [
                {"failed": v.failed, "case": asdict(v.case), "figures": v.figures}
                for v in res.verdicts
                if not v.ok
            ],
            "saved": [str(p) for p in res.saved],
            "passive_surges_over_device_limit": surges,
        }
        write_json(args.json, doc)
    if args.html:
        html_pages.fuzz_page(args.html, prj, res, args.seed)
    return 0 if res.ok else 1
