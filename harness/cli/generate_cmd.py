"""``pfcrig generate``: the C sources, optionally the target shell and the cross-compile check."""

from __future__ import annotations

import argparse
import shutil
import sys

from codegen import target
from codegen.board import BOARDS, render_board
from codegen.files import write_folder
from codegen.render import render, render_link
from design.project import Project, load_project

from . import checks
from .checks import UsageError
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("generate", help="write the C control code")
    q.add_argument("config")
    q.add_argument(
        "-o",
        "--output",
        metavar="DIR",
        help="folder for the .c/.h files (required but with --board list)",
    )
    q.add_argument(
        "--check-target",
        action="store_true",
        help="cross-compile for Cortex-M (arm-none-eabi-gcc) and print flash, RAM and state size",
    )
    q.add_argument(
        "--with-link",
        action="store_true",
        help="also write the target shell (the lockstep link around the step) for a board run by "
        "`pfcrig pil --target serial`",
    )
    q.add_argument(
        "--board",
        metavar="NAME",
        help="also write a complete firmware project for this board beside the controller "
        "(Makefile, CMakeLists.txt, startup, linker script, interrupt skeleton, port header, "
        "README); 'list' prints the boards",
    )
    q.set_defaults(func=generate)


def generate(args: argparse.Namespace) -> int:
    if args.board == "list":
        for b in BOARDS.values():
            print(f"{b.name:12s} {b.cpu_name}; number formats: {', '.join(b.formats)}")
        return 0
    if args.board is not None and args.board not in BOARDS:
        raise UsageError(f"--board {args.board!r}: one of {', '.join(BOARDS)} (or 'list')")
    if not args.output:
        raise UsageError("-o DIR is required: the folder for the .c/.h files")
    checks.output_dir(args.output, "-o")
    prj = load_project(args.config)
    files = render(prj)
    extra = {}
    if args.with_link:
        extra = render_link(prj)
    if args.board:
        extra = {**extra, **render_board(prj, args.board)}
    paths = write_folder({**files, **extra}, args.output)
    print(f"wrote {len(paths)} files to {args.output} (config digest {prj.config.digest()})")
    p = prj.config.control.prefix
    if args.board:
        print(
            f"firmware project for {args.board}: `make -C {args.output}` builds {p}_pil.elf (the "
            f"lockstep link image for QEMU) and compiles {p}_isr.c; the board supplies the "
            f"functions of {p}_board_port.h; bring-up order in {args.output}/README.md"
        )
    elif extra:
        print(
            f"target shell for `pfcrig pil --target serial`: {', '.join(sorted(extra))}; the "
            "board supplies "
            f"{p}_link_getc, {p}_link_putc, {p}_link_flush and {p}_link_ticks (see {p}_link.h)"
        )
    if args.check_target:
        return check_target(prj, files)
    return 0


def _step_cycles(prj: Project, fmt: str) -> bool:
    """The step's cycles on the emulated core (a 0.05 s lockstep run at the nominal line and
    full load) as a share of the PWM period at [target] core_clock_hz; False when even this
    lower bound overruns the half period the contract's timing leaves the step."""
    from harness.closedloop.scenario import default_for
    from harness.targets.pil import run_pil

    from .pil_cmd import isr_budget

    emulated = "qemu-m3" if fmt == "q15" else "qemu-m4f"
    if shutil.which("qemu-system-arm") is None:
        print("step cycles: qemu-system-arm not installed (Debian: qemu-system-arm); skipped")
        return True
    pil = run_pil(prj, default_for(prj.config.spec, 0.05), target=emulated)
    if not pil.cost:
        print(f"step cycles: the {emulated} run gave no count")
        return True
    b = isr_budget(prj, emulated, pil.cost["max"])
    print(
        f"step cycles on {emulated} ({pil.cost['steps']} steps at the nominal line, full load): "
        f"at most {pil.cost['max']:.0f} instructions, at least {b['cycles_pct_of_period']:.1f} % "
        f"of the PWM period at [target] core_clock_hz = {b['core_clock_hz']:.4g} Hz "
        f"({b['cycles_pct_of_half_period']:.1f} % of the half period from the ADC trigger to "
        "the update; instructions are a lower bound on cycles)"
    )
    if b["cycles_pct_of_half_period"] > 100.0:
        print(
            "step cycles: DO NOT FIT the half period from the ADC trigger (counter top) to the "
            "update (bottom): raise [target] core_clock_hz, lower [spec] fsw, or use a faster "
            "core"
        )
        return False
    return True


def check_target(prj: Project, files: dict[str, str]) -> int:
    if not target.available():
        print(
            "target check: arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi); skipped",
            file=sys.stderr,
        )
        return 1
    p = prj.config.control.prefix
    fmt = prj.config.control.number_format
    targets = ["cortex-m4f"] + (["cortex-m3", "cortex-m0plus"] if fmt == "q15" else [])
    rows, bad, over = [], False, False
    for t in targets:
        rep = target.check(files, p, t)
        ok_flash = rep.flash_B <= target.FLASH_LIMIT_B
        ok_state = rep.state_B <= target.STATE_LIMIT_B
        # the flash and state targets are for the float build on the Cortex-M4F
        held = t == "cortex-m4f" and fmt == "float32"
        over |= held and not (ok_flash and ok_state)
        bad |= not rep.ok() or (held and not (ok_flash and ok_state))
        rows.append(
            (
                t,
                fmt,
                rep.flash_B,
                rep.ram_B,
                rep.state_B,
                rep.stack.bytes if rep.stack else "?",
                ", ".join(rep.undefined) or "none",
                len(rep.support_calls),
            )
        )
    print(
        format_table(
            [
                "target",
                "format",
                "flash (B)",
                "static RAM (B)",
                "sizeof ctrl (B)",
                "step stack (B)",
                "foreign symbols",
                "support calls",
            ],
            rows,
        )
    )
    print(
        f"step stack: the worst case over {p}_step's call tree (-fcallgraph-info=su), not "
        "counting compiler support routines"
    )
    bad |= not _step_cycles(prj, fmt)
    budget = f"flash <= {target.FLASH_LIMIT_B} B, state <= {target.STATE_LIMIT_B} B"
    if fmt == "float32":
        print(
            f"budget of this float32 build on cortex-m4f: {budget}: {'not met' if over else 'met'}"
        )
    else:
        print(
            f"this is a {fmt} build: the budget ({budget}) is set for the float32 build on "
            "cortex-m4f; the sizes above are reported, not held to it"
        )
    return 1 if bad else 0
