"""The ``pfcrig`` command line: the parser and one error path; each command in its module."""

from __future__ import annotations

import argparse
import signal
import sys
import threading

from codegen.build import BuildError
from design.config import ConfigError
from harness.targets.link import LinkError

from . import (
    bench_cmd,
    design_cmd,
    fuzz_cmd,
    generate_cmd,
    init_cmd,
    loopgain_cmd,
    pil_cmd,
    results_cmd,
    run_cmd,
    survey_cmd,
    sweep_cmd,
)
from .caution import CAUTION
from .checks import UsageError

COMMANDS = (
    init_cmd,
    design_cmd,
    generate_cmd,
    run_cmd,
    loopgain_cmd,
    sweep_cmd,
    fuzz_cmd,
    bench_cmd,
    pil_cmd,
    results_cmd,
    survey_cmd,
)


def _terminate(signum: int, frame: object) -> None:
    raise KeyboardInterrupt


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="pfcrig",
        description="Totem-pole PFC: size the stage, generate C control firmware, prove it in "
        "closed loop.",
        epilog=CAUTION,
    )
    p.add_argument(
        "--debug",
        action="store_true",
        help="show the traceback of an internal error (please report it)",
    )
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for module in COMMANDS:
        module.register(sub)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    # SIGTERM ends a command like Ctrl-C does: temporaries removed, earlier outputs intact
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _terminate)
    try:
        return int(args.func(args) or 0)
    except (ConfigError, UsageError) as exc:
        print(f"pfcrig: error: {exc}", file=sys.stderr)
        return 2
    except BuildError as exc:
        print(f"pfcrig: build error: {exc}", file=sys.stderr)
        return 1
    except (LinkError, TimeoutError) as exc:  # a target behind the link that cannot be reached
        print(f"pfcrig: link error: {exc}", file=sys.stderr)
        return 1
    except BrokenPipeError:
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("pfcrig: interrupted", file=sys.stderr)
        return 130
    except OSError as exc:  # a file or folder the command could not use
        print(f"pfcrig: error: {exc}", file=sys.stderr)
        return 1
    except Exception as exc:  # a defect of pfcrig: one line, the traceback with --debug
        if args.debug:
            raise
        print(
            f"pfcrig: internal error: {type(exc).__name__}: {exc} (please report this; "
            "run again with --debug for the traceback)",
            file=sys.stderr,
        )
        return 1
