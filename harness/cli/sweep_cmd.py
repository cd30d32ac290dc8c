"""``pfcrig sweep``: PF, THD, efficiency and the Class A margin over the operating range."""

from __future__ import annotations

import argparse
import sys

from design.project import load_project
from harness.campaigns import sweep, sweep_plots
from harness.closedloop.loop import RECORD_BYTES_PER_PERIOD
from harness.closedloop.report import firmware_digest

from . import checks, html_pages
from .output import write_json
from .results_cmd import add_db_options, open_recorder
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "sweep",
        help="steady operating points over line voltage, load and frequency (PF, THD, "
        "efficiency, Class A margin)",
    )
    q.add_argument("config")
    q.add_argument(
        "--vrms",
        type=checks.numbers(float, 0.0, lo_open=True),
        metavar="LIST",
        help="line voltages, V rms, comma-separated, within the design's line range (default: "
        f"the range in {sweep.GRID_STEPS} steps, 115 and 230 V on the grid where in range)",
    )
    q.add_argument(
        "--load",
        type=checks.numbers(float, 1.0, 100.0),
        metavar="LIST",
        help="loads in %% of rated output power, comma-separated, each 1..100 (below 1 %% a "
        "stage bursts or idles: no steady figures to sign off) (default 10,20,50,75,100)",
    )
    q.add_argument(
        "--freq",
        type=checks.numbers(float, 0.0, lo_open=True),
        metavar="LIST",
        help="line frequencies, Hz, comma-separated, within the accepted band (default: the "
        "config's line_freq)",
    )
    q.add_argument("--load-kind", choices=["resistive", "constant_power"], default="resistive")
    q.add_argument(
        "--duration",
        type=checks.number(float, 0.0, lo_open=True),
        default=sweep.DEFAULT_DURATION_S,
        metavar="S",
        help=f"each point's run from start-up (s, default {sweep.DEFAULT_DURATION_S:g}); a point "
        "that has not settled by then is reported without figures, with the reason",
    )
    q.add_argument(
        "--batch",
        type=checks.number(int, 1, 256),
        default=8,
        metavar="B",
        help="points per lockstep batch (default 8)",
    )
    checks.add_workers(q, "one batch at a time each", default=1)
    q.add_argument("--json", metavar="OUT", help="write the points as JSON")
    q.add_argument("--plot", metavar="DIR", help="write PNG plots (figures against load, maps)")
    q.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    add_db_options(q)
    checks.add_cluster_options(q)
    q.set_defaults(func=sweep_cmd)


def _pct(x: float | None) -> str:
    return "n/a" if x is None else f"{100 * x:.2f}"


def _row(r: dict) -> tuple:
    if not r["steady"]:
        return (
            f"{r['vrms_V']:g}",
            f"{100 * r['load_frac']:g}",
            f"{r['freq_Hz']:g}",
            "not steady",
            "",
            "",
            "",
            "",
        )
    ca = f"{r['class_a_worst_ratio']:.2f}" if r["class_a_applicable"] else "n/a"
    return (
        f"{r['vrms_V']:g}",
        f"{100 * r['load_frac']:g}",
        f"{r['freq_Hz']:g}",
        f"{r['pf']:.4f}",
        _pct(r["thd_i"]),
        _pct(r["efficiency"]),
        ca,
        _pct(r["zc_spike_of_rated"]),
    )


def sweep_cmd(args: argparse.Namespace) -> int:
    checks.output_file(args.json, "--json")
    checks.output_dir(args.plot, "--plot")
    checks.output_file(args.html, "--html")
    prj = load_project(args.config)
    vrms = args.vrms or sweep.default_vrms(prj)
    loads = tuple(x / 100.0 for x in (args.load or sweep.DEFAULT_LOADS_PCT))
    freqs = args.freq or (prj.config.spec.line_freq,)
    for name, vals in (("--vrms", vrms), ("--load", args.load or ()), ("--freq", freqs)):
        twice = sorted({v for v in vals if list(vals).count(v) > 1})
        if twice:
            raise checks.UsageError(f"{name} lists {', '.join(f'{v:g}' for v in twice)} twice")
    errs = sweep.check_grid(prj, vrms, freqs)
    if errs:
        raise checks.UsageError("; ".join(errs))
    points = sweep.grid(vrms, loads, freqs)
    checks.run_length(args.duration, prj.config.spec.fsw, args.batch, RECORD_BYTES_PER_PERIOD)
    params = {
        "vrms_V": list(vrms),
        "load_frac": list(loads),
        "freq_Hz": list(freqs),
        "load_kind": args.load_kind,
        "duration_s": args.duration,
    }
    rec = open_recorder(args, "sweep", prj, params, len(points))
    recs, wall = sweep.sweep(
        prj,
        points,
        load_kind=args.load_kind,
        duration_s=args.duration,
        batch=args.batch,
        workers=args.workers,
        log=lambda m: print(m, file=sys.stderr),
        recorder=rec,
        scheduler=args.scheduler,
    )
    head = ["V rms", "load %", "Hz", "PF", "THD(i) %", "eff %", "Class A h/limit", "ZC % rated"]
    print(format_table(head, [_row(r) for r in recs]))
    print(f"results: sweep {rec.campaign_id} in {args.db} (pfcrig results show {rec.campaign_id})")
    bad = [r for r in recs if not r["steady"]]
    print(f"{len(recs)} points, {len(bad)} without a steady window, {wall:.1f} s")
    for r in bad:
        print(
            f"  not steady at {r['vrms_V']:g} V, {100 * r['load_frac']:g} %, {r['freq_Hz']:g} Hz: "
            f"{r['steady_reason']}"
        )
    if args.json:
        doc = {
            "config_path": args.config,
            "config_digest": prj.config.digest(),
            "firmware_digest": firmware_digest(prj),
            "load_kind": args.load_kind,
            "duration_s": args.duration,
            "wall_s": wall,
            "losses_not_modelled": recs[0].get("losses_not_modelled") if recs else None,
            "points": recs,
        }
        write_json(args.json, doc)
    if args.plot:
        paths = sweep_plots.write_plots(recs, args.plot)
        print("wrote " + ", ".join(map(str, paths)))
    if args.html:
        html_pages.sweep_page(args.html, prj, recs, wall)
    return 1 if bad else 0  # a map with points missing is not one to sign off
