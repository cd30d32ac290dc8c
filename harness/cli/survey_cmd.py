"""``pfcrig survey``: designs drawn across the practical space, each through design, generate,
build and a short fault campaign."""

from __future__ import annotations

import argparse
import sys

from harness.campaigns import designs
from harness.campaigns.invariants import ZC_LIMIT_OF_RATED

from . import checks
from .output import write_json
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "survey",
        help="draw designs across the practical space (300 W-10 kW, universal/high/low line, "
        "40-200 kHz, float32 and q15) and run each one's firmware through a fault campaign",
    )
    q.add_argument(
        "--designs",
        type=checks.number(int, 1, 10_000),
        default=20,
        metavar="N",
        help="designs to draw (default 20)",
    )
    q.add_argument(
        "--cases",
        type=checks.number(int, 1, 4096),
        default=16,
        metavar="K",
        help="fault cases per design, every invariant checked (default 16)",
    )
    checks.add_seed(q)
    checks.add_workers(q, "one design at a time each")
    q.add_argument(
        "--out",
        default="survey_failures",
        metavar="DIR",
        help="a design with failing cases is saved here as DIR/design_NNN/config.toml beside "
        "its failing scenario files",
    )
    q.add_argument("--json", metavar="OUT", help="write every design's record as JSON")
    checks.add_cluster_options(q)
    q.set_defaults(func=survey_cmd)


def _row(r: dict) -> tuple:
    d = r["design"]
    if r["refused"] or r["build_error"]:
        verdict = "refused" if r["refused"] else "BUILD ERROR"
    else:
        verdict = f"{r['failing']}/{r['cases']} failing" if r["failing"] else f"{r['cases']} ok"
    return (
        r["index"],
        f"{d['power_W']:g}",
        d["line_class"],
        f"{d['line_freq_Hz']:g}",
        f"{d['vout_V']:g}",
        f"{d['fsw_Hz'] / 1e3:g}",
        f"{d['holdup_s'] * 1e3:g}",
        d["number_format"],
        "-"
        if r.get("light_load_zc_of_rated") is None
        else f"{100 * r['light_load_zc_of_rated']:.1f}",
        verdict,
    )


def survey_cmd(args: argparse.Namespace) -> int:
    checks.output_dir(args.out, "--out")
    checks.output_file(args.json, "--json")
    recs, wall = designs.survey(
        args.designs,
        args.cases,
        seed=args.seed,
        workers=args.workers,
        out_dir=args.out,
        log=lambda m: print(m, file=sys.stderr),
        scheduler=args.scheduler,
    )
    head = [
        "#",
        "W",
        "line",
        "Hz",
        "vout V",
        "fsw kHz",
        "hold-up ms",
        "format",
        "zc@<=20% %",
        "verdict",
    ]
    print(format_table(head, [_row(r) for r in recs]))
    failing = [r for r in recs if r.get("failing") or r["build_error"]]
    refused = [r for r in recs if r["refused"]]
    cases = sum(r.get("cases", 0) for r in recs)
    bad_cases = sum(r.get("failing", 0) for r in recs)
    print(
        f"{len(recs)} designs: {len(failing)} with failing firmware, {len(refused)} refused at "
        f"design time; {bad_cases} of {cases} cases failing; {wall:.1f} s"
    )
    light = [
        r["light_load_zc_of_rated"] for r in recs if r.get("light_load_zc_of_rated") is not None
    ]
    if light:
        print(
            f"zero-crossing distortion at <= {100 * designs.LIGHT_LOAD_FRAC:g} % load, of the "
            f"rated peak current: worst {100 * max(light):.1f} % over {len(light)} designs (bound "
            f"{100 * ZC_LIMIT_OF_RATED:g} %)"
        )
    surged = [r for r in recs if r.get("passive_surges")]
    if surged:
        worst = max(
            (s["il_peak_A"] / r["device_current_limit_A"], r["index"])
            for r in surged
            for s in r["passive_surges"]
        )
        print(
            f"{len(surged)} designs passed cases whose inductor carried more than the device "
            f"limit as current no gate pattern stops (the line rectified into a bus under its "
            f"peak; no invariant holds it, README 'Known limitation: the rectified surge'): "
            f"{sum(len(r['passive_surges']) for r in surged)} cases, worst "
            f"{worst[0]:.2f} x the limit (design {worst[1]})"
        )
    for r in refused:
        print(f"  design {r['index']} refused: {r['refused']}")
    for r in failing:
        if r["build_error"]:
            print(f"  design {r['index']} did not build: {r['build_error']}")
        else:
            why = sorted({k for f in r["failures"] for k in f["failed"]})
            print(f"  design {r['index']}: {', '.join(why)}; saved {', '.join(r.get('saved', []))}")
    if args.json:
        write_json(
            args.json,
            {"seed": args.seed, "cases_per_design": args.cases, "wall_s": wall, "designs": recs},
        )
    return 1 if failing else 0
