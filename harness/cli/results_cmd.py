"""``pfcrig results``: the campaigns and sweeps in the results database, one, or two compared."""

from __future__ import annotations

import argparse
import json
import re

from harness.campaigns import results as db

from . import checks, html_pages
from .output import write_json
from .tables import format_table


def add_db_options(q: argparse.ArgumentParser) -> None:
    """``--db`` and ``--resume`` for the commands that write campaigns."""
    q.add_argument(
        "--db",
        default=db.DEFAULT_DB,
        metavar="PATH",
        help=f"results database (SQLite; default ./{db.DEFAULT_DB}); every case is committed "
        "as its batch finishes",
    )
    q.add_argument(
        "--resume",
        action="store_true",
        help="finish the latest unfinished campaign of this config, firmware and parameters "
        "in --db, without running its finished cases again",
    )


def open_recorder(args: argparse.Namespace, kind: str, prj, params: dict, planned: int):
    """The recorder of this command's campaign in ``args.db``."""
    from harness.closedloop.report import firmware_digest

    checks.output_file(args.db, "--db")
    try:
        con = db.connect(args.db)
        return db.recorder(
            con,
            kind,
            str(prj.config.source),
            prj.config.digest(),
            firmware_digest(prj),
            params,
            planned,
            args.resume,
        )
    except db.ResultsError as exc:
        raise checks.UsageError(str(exc)) from None


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("results", help="list, show or compare campaigns in the results database")
    q.add_argument("--db", default=db.DEFAULT_DB, metavar="PATH")
    verbs = q.add_subparsers(dest="verb", required=True, metavar="VERB")
    verbs.add_parser("list", help="every campaign: kind, config, firmware, cases done, failing")
    s = verbs.add_parser("show", help="one campaign: parameters, failing cases")
    s.add_argument("id", type=checks.number(int, 1, 2**63 - 1))
    s.add_argument("--json", metavar="OUT", help="write the campaign and its cases as JSON")
    s.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    c = verbs.add_parser(
        "compare",
        help="two campaigns case by case (matched by scenario): verdicts that changed, "
        "figures that moved",
    )
    c.add_argument("a", type=checks.number(int, 1, 2**63 - 1))
    c.add_argument("b", type=checks.number(int, 1, 2**63 - 1))
    c.add_argument(
        "--tol",
        type=checks.number(float, 0.0, 10.0),
        default=0.05,
        metavar="REL",
        help="a figure moved when it differs by more than this fraction of the larger "
        "(default 0.05)",
    )
    c.add_argument("--json", metavar="OUT")
    q.set_defaults(func=results_cmd)


def _list(con) -> None:
    rows = [
        (
            c["id"],
            c["kind"],
            c["started_utc"],
            c["config_path"],
            c["firmware_digest"],
            f"{c['done']}/{c['planned']}",
            c["failing"],
            "yes" if c["finished_utc"] else "no",
        )
        for c in db.campaigns(con)
    ]
    head = ["id", "kind", "started (UTC)", "config", "firmware", "cases", "failing", "finished"]
    print(format_table(head, rows))


def _show(con, args: argparse.Namespace) -> None:
    c = db.campaign(con, args.id)
    failing = [k for k in c["cases"] if not k["ok"]]
    print(
        f"campaign {c['id']}: {c['kind']} of {c['config_path']} (config "
        f"{c['config_digest']}, firmware {c['firmware_digest']}, pfcrig "
        f"{c['pfcrig_version']}) on {c['host']}, started {c['started_utc']}, "
        f"finished {c['finished_utc'] or 'no'}"
    )
    print(f"  parameters: {json.dumps(c['params'], sort_keys=True)}")
    print(f"  {len(c['cases'])}/{c['planned']} cases, {len(failing)} failing")
    for k in failing:
        why = "; ".join(f"{n}: {r}" for n, r in k["failed"].items())
        name = re.search(r'^name = "([^"]*)"', k["scenario"], re.M)
        print(f"  case {k['idx']} ({name.group(1) if name else 'unnamed'}): {why}")
    if args.json:
        write_json(args.json, c)
    if args.html:
        html_pages.results_page(args.html, c)


def _compare(con, args: argparse.Namespace) -> None:
    out = db.compare(con, args.a, args.b, args.tol)
    print(
        f"campaigns {args.a} and {args.b}: {out['matched']} cases matched by scenario, "
        f"{out['only_a']} only in {args.a}, {out['only_b']} only in {args.b}"
    )
    if out["a"]["kind"] != out["b"]["kind"]:
        print(
            f"  warning: a {out['a']['kind']} compared with a {out['b']['kind']}: no case matches"
        )
    elif out["matched"] == 0:
        print("  warning: no case matches: different configs, seeds or grids, or an empty one")
    print(f"  {len(out['verdict_changed'])} changed verdict:")
    for d in out["verdict_changed"]:
        print(
            f"    case {d['idx_a']}/{d['idx_b']}: {sorted(d['failed_a']) or 'ok'} -> "
            f"{sorted(d['failed_b']) or 'ok'}"
        )
    print(f"  {len(out['figures_moved'])} figures moved by more than {100 * args.tol:g} %")
    for d in out["figures_moved"][:50]:
        print(f"    case {d['idx_a']}/{d['idx_b']} {d['figure']}: {d['a']:.6g} -> {d['b']:.6g}")
    if args.json:
        write_json(args.json, out)
    elif len(out["figures_moved"]) > 50:
        print("    ... (all of them with --json)")


def results_cmd(args: argparse.Namespace) -> int:
    from pathlib import Path

    if Path(args.db).is_dir():
        raise checks.UsageError(f"--db {args.db}: is a folder, not a results database")
    if not Path(args.db).is_file():
        raise checks.UsageError(f"--db {args.db}: no such results database")
    for opt in ("json", "html"):
        checks.output_file(getattr(args, opt, None), f"--{opt}")
    try:
        con = db.connect(args.db, create=False)
        if args.verb == "list":
            _list(con)
        elif args.verb == "show":
            _show(con, args)
        else:
            _compare(con, args)
    except db.ResultsError as exc:
        raise checks.UsageError(str(exc)) from None
    return 0
