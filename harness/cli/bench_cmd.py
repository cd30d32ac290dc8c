"""``pfcrig bench``: the closed loop's cost on this machine, measured in one run."""

from __future__ import annotations

import argparse
import sys
from importlib import resources

from design.project import load_project
from harness.closedloop.bench import bench

from . import checks
from .output import write_json
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "bench", help="measure the step cost, real-time factors and batch throughput here"
    )
    q.add_argument("--config", help="config to measure (default: the shipped example)")
    q.add_argument(
        "--sizes",
        type=checks.sizes,
        default=(1, 16, 256, 1024),
        help="batch sizes, each 1..4096 (default 1,16,256,1024)",
    )
    q.add_argument("--json", metavar="OUT")
    q.set_defaults(func=bench_cmd)


def bench_cmd(args: argparse.Namespace) -> int:
    cfg = args.config or str(resources.files("harness").joinpath("data/universal_1k5.toml"))
    prj = load_project(cfg)
    checks.output_file(args.json, "--json")
    sizes = args.sizes
    out = bench(prj, sizes=sizes, log=lambda m: print(m, file=sys.stderr))
    out["config"] = cfg
    t, b256 = out["targets"], out["batch"].get("256", {}).get("scenario_s_per_s")
    measured = {
        "single_switching_rtf": (
            f"{out['single_switching_rtf']:.2f} x real time",
            f">= {t['single_switching_rtf']:g} x: one scenario runs ahead of the clock",
        ),
        "batch256_scenario_s_per_s": (
            "not measured" if b256 is None else f"{b256:.1f} scenario-s/s",
            f">= {t['batch256_scenario_s_per_s']:g} at N = 256: campaign throughput "
            "(a batch of 32 or more lanes runs on numba's threads)",
        ),
        "best_batch_vs_bare_c_max_ratio": (
            f"{out['best_batch_vs_bare_c_ratio']:.1f}",
            f"<= {t['best_batch_vs_bare_c_max_ratio']:g}: the plant "
            "costs at most this many bare C steps",
        ),
    }
    rows = [(k, "met" if v else "NOT met", *measured[k]) for k, v in out["meets"].items()]
    print(format_table(["target", "status", "measured here", "target and why"], rows))
    print(
        f"bare step {out['bare_step_ns']:.1f} ns; single switching "
        f"{out['single_switching_rtf']:.4f} x real time; "
        f"averaged {out['single_averaged_rtf']:.4f} x; best batch "
        f"{out['best_batch_rate_per_s']:.0f} scenario-periods/s"
    )
    if args.json:
        write_json(args.json, out)
    return 0
