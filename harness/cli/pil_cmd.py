"""``pfcrig pil``: the controller on a target over the lockstep link (processor in the loop)."""

from __future__ import annotations

import argparse
import sys

from codegen import target as cross
from codegen.render import render
from design.project import load_project
from harness.closedloop import report
from harness.closedloop.loop import run
from harness.targets.link import LinkError
from harness.targets.pil import FLOAT32_INSN_LIMIT, TARGETS, compare_outputs, run_pil

from . import checks
from .checks import UsageError
from .output import scenario_of, write_json

PIL_DEFAULT_S = 0.5  # s: start-up (~0.22 s) and one IEC 61000-4-7 window fit (README)


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "pil", help="run the controller on a target over the lockstep link (processor in the loop)"
    )
    q.add_argument("config")
    q.add_argument(
        "--target",
        choices=TARGETS,
        default="host",
        help="host: a separate process, stdin/stdout as its UART; qemu-m4f: the image "
        "cross-compiled for the Cortex-M4F, booted on QEMU's mps2-an386 with its first UART on a "
        "pseudo-terminal; qemu-m3: the q15 build on the Cortex-M3 of QEMU's mps2-an385; "
        "serial: a board already running the target shell, on --port",
    )
    q.add_argument(
        "--port",
        metavar="PORT",
        help="serial device (/dev/ttyUSB0) or pyserial URL (socket://HOST:PORT) for --target "
        "serial",
    )
    q.add_argument(
        "--baud",
        type=checks.number(int, 50, 20_000_000),
        default=115200,
        metavar="N",
        help="serial bit rate (default 115200, 8N1)",
    )
    q.add_argument("--scenario", metavar="FILE")
    q.add_argument("--duration", type=checks.number(float, 0.0, lo_open=True), metavar="S")
    q.add_argument(
        "--timeout",
        type=checks.number(float, 0.0, 600.0, lo_open=True),
        default=2.0,
        metavar="S",
        help="answer timeout per frame (s)",
    )
    q.add_argument(
        "--json", metavar="OUT", help="write the report (partial if the target stops answering)"
    )
    q.set_defaults(func=pil_cmd)


CORE = {"qemu-m4f": "cortex-m4f", "qemu-m3": "cortex-m3"}


def isr_budget(prj, target: str, max_instructions: float) -> dict:
    """The step's worst measured instructions as a share of the PWM period at the config's
    core clock (a lower bound on cycles: wait states, bus stalls and multi-cycle instructions
    add), and the worst-case stack of the step's call tree on that core."""
    clock = prj.config.target.core_clock_hz
    per_period = clock / prj.config.spec.fsw
    out = {
        "core_clock_hz": clock,
        "cycles_per_period": per_period,
        "cycles_pct_of_period": 100.0 * max_instructions / per_period,
        "cycles_pct_of_half_period": 200.0 * max_instructions / per_period,
        "cycles_note": "instructions counted on the emulated core: a lower bound on cycles",
        "stack_bytes": None,
        "stack_path": None,
        "stack_unknown_callees": [],
    }
    if target in CORE:
        rep = cross.check(render(prj), prj.config.control.prefix, CORE[target])
        if rep.stack is not None:
            out.update(
                stack_bytes=rep.stack.bytes,
                stack_path=rep.stack.path,
                stack_unknown_callees=rep.stack.unknown,
            )
    return out


def pil_cmd(args: argparse.Namespace) -> int:
    checks.output_file(args.json, "--json")
    if args.target == "serial" and not args.port:
        print(
            "pfcrig pil: --target serial needs --port (a device such as /dev/ttyUSB0, or a "
            "pyserial URL "
            "such as socket://127.0.0.1:4000)",
            file=sys.stderr,
        )
        return 2
    prj = load_project(args.config)
    if args.target == "qemu-m3" and prj.config.control.number_format != "q15":
        raise UsageError(
            "--target qemu-m3 (Cortex-M3, no FPU) runs the q15 build: set [control] "
            'number_format = "q15" in the config'
        )
    scn = scenario_of(args, prj, PIL_DEFAULT_S)
    try:
        pil = run_pil(
            prj, scn, target=args.target, timeout_s=args.timeout, port=args.port, baud=args.baud
        )
    except (LinkError, TimeoutError) as exc:  # before any period ran: still a report
        print(f"pfcrig pil: {exc}", file=sys.stderr)
        if args.json:
            write_json(
                args.json,
                {
                    "target": args.target,
                    "scenario": scn.name,
                    "periods": 0,
                    "aborted": f"before the first period: {exc}",
                },
            )
        return 1
    res, stats, wall = pil.result, pil.link_stats, pil.wall_s
    doc = {
        "target": args.target,
        "scenario": scn.name,
        "periods": res.periods,
        "link": stats,
        "wall_s": wall,
        "real_time_factor": res.periods / prj.config.spec.fsw / wall,
    }
    if args.target == "serial":
        doc["port"], doc["baud"] = args.port, args.baud
    code = 0
    if "aborted" in res.extras:
        doc["aborted"] = res.extras["aborted"]
        print(f"pfcrig pil: {res.extras['aborted']}", file=sys.stderr)
        code = 1
    else:
        rep = report.lane_report(res)
        doc.update(rep)
        print(report.summary_text(rep))
        ref = run(prj, [scn], progress=False)
        cmp_ = compare_outputs(ref, res)
        doc["equivalence"] = {
            "periods": cmp_.periods,
            "equal": cmp_.equal,
            "first_difference": cmp_.first_difference,
            "final_state_equal": cmp_.final_state_equal,
        }
        if cmp_.equal:
            print(
                f"target outputs equal the in-process run for all {cmp_.periods} periods, "
                f"and so does the final controller state"
            )
        else:
            print(
                "target differs from the in-process run: "
                f"{cmp_.first_difference or 'final controller state'}"
            )
            code = 1
    if "after_run_error" in res.extras:
        doc["after_run_error"] = res.extras["after_run_error"]
        print(f"pfcrig pil: after the run: {res.extras['after_run_error']}", file=sys.stderr)
        code = 1
    if pil.cost:
        c = pil.cost
        doc["cost_on_target"] = {
            **c,
            "method": "SysTick read around each step under QEMU -icount shift=0 "
            "(time counts instructions), calibrated at boot against a loop of known "
            "instruction count; ticks of an empty measurement subtracted",
            "float32_limit_instructions": FLOAT32_INSN_LIMIT,
        }
        print(
            f"cost on the target: {c['mean']:.0f} instructions per step on average, "
            f"{c['max']:.0f} at most "
            f"(min {c['min']:.0f}; resolution {c['resolution']:.0f}) over {c['steps']} steps"
        )
        doc["cost_on_target"].update(isr_budget(prj, args.target, c["max"]))
        b = doc["cost_on_target"]
        print(
            f"interrupt budget at [target] core_clock_hz = {b['core_clock_hz']:.4g} Hz: at least "
            f"{b['cycles_pct_of_period']:.1f} % of the PWM period "
            f"({b['cycles_pct_of_half_period']:.1f} % of the half period from the ADC trigger to "
            f"the update); worst-case stack {b['stack_bytes']} B"
            + (
                f" plus library routines ({', '.join(b['stack_unknown_callees'])})"
                if b["stack_unknown_callees"]
                else ""
            )
        )
    if pil.image:
        doc["image"] = pil.image
        print(f"image: {pil.image['flash_B']} B flash, {pil.image['ram_B']} B RAM (static)")
    print(
        f"link: {stats['frames_sent']} frames sent, {stats['retries']} retries, "
        f"{stats['bad_crc']} bad CRC, "
        f"{stats['bytes_dropped']} bytes dropped; {doc['real_time_factor']:.3f} x real time"
    )
    if args.json:
        write_json(args.json, doc)
    return code
