"""The ``pfcrig`` command line."""
from __future__ import annotations

import argparse
import sys
from importlib import resources
from pathlib import Path

from codegen.build import BuildError
from codegen.config import ConfigError

from . import commands
from .link import LinkError

CAUTION = (
    "CAUTION: a PFC bus (~400 V DC) is lethal. pfcrig output is reference material, to be validated "
    "on hardware by qualified people; local electrical codes and licensed practice take precedence."
)


def _cmd_init(args: argparse.Namespace) -> int:
    out = Path(args.dir)
    target = out / "pfcrig.toml"
    if target.exists() and not args.force:
        raise ConfigError(f"{target}: exists already (use --force to overwrite)")
    out.mkdir(parents=True, exist_ok=True)
    text = resources.files("harness").joinpath("data/universal_1k5.toml").read_text(encoding="utf-8")
    target.write_text(text, encoding="utf-8")
    print(f"wrote {target}")
    print(f"next: pfcrig design {target}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="pfcrig",
        description="Totem-pole PFC: size the stage, generate C control firmware, prove it in closed loop.",
        epilog=CAUTION,
    )
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    q = sub.add_parser("init", help="write a commented example config")
    q.add_argument("dir", nargs="?", default=".", help="folder for pfcrig.toml (default: here)")
    q.add_argument("--force", action="store_true", help="overwrite an existing pfcrig.toml")
    q.set_defaults(func=_cmd_init)

    q = sub.add_parser("design", help="size the power stage and tune the loops")
    q.add_argument("config")
    q.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    q.add_argument("--plot", metavar="DIR", help="write Bode plots of both loops (PNG) into DIR")
    q.set_defaults(func=commands.design)

    commands.register(sub)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except ConfigError as exc:
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


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
