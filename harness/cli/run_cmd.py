"""``pfcrig run``: the generated C in closed loop against the plant, with its report."""

from __future__ import annotations

import argparse

from design.project import load_project
from harness.closedloop import plots, report
from harness.closedloop.loop import run

from . import checks, html_pages
from .output import scenario_of, write_json


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "run", help="compile the generated C and run it in closed loop against the plant model"
    )
    q.add_argument("config")
    q.add_argument(
        "--scenario", metavar="FILE", help="scenario TOML (default: nominal line, full load, 0.6 s)"
    )
    q.add_argument("--model", choices=["switching", "averaged"], default="switching")
    q.add_argument(
        "--duration",
        type=checks.number(float, 0.0, lo_open=True),
        metavar="S",
        help="override the scenario duration (s)",
    )
    q.add_argument("--json", metavar="OUT", help="write the report as JSON")
    q.add_argument("--csv", metavar="FILE", help="write the per-period waveforms as CSV")
    q.add_argument("--plot", metavar="DIR", help="write PNG plots")
    q.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    q.add_argument("--quiet", action="store_true", help="no progress bar")
    q.set_defaults(func=run_cmd)


def run_cmd(args: argparse.Namespace) -> int:
    checks.output_file(args.json, "--json")
    checks.output_file(args.csv, "--csv")
    checks.output_dir(args.plot, "--plot")
    checks.output_file(args.html, "--html")
    prj = load_project(args.config)
    scn = scenario_of(args, prj, 0.6)
    res = run(prj, [scn], model=args.model, progress=not args.quiet)
    rep = report.lane_report(res)
    rep["wall_s"] = res.wall_s
    rep["real_time_factor"] = scn.duration_s / res.wall_s
    print(report.summary_text(rep))
    if args.json:
        write_json(args.json, rep)
    if args.csv:
        with checks.atomic_path(args.csv) as tmp:
            report.write_csv(res, tmp)
        print(f"wrote {args.csv}")
    if args.plot:
        paths = plots.write_plots(res, rep, args.plot)
        print("wrote " + ", ".join(map(str, paths)))
    if args.html:
        html_pages.run_page(args.html, prj, scn, res, rep)
    return 0
