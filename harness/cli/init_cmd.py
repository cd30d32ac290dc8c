"""``pfcrig init``: a commented example config."""

from __future__ import annotations

import argparse
from importlib import resources
from pathlib import Path

from design.config import ConfigError


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("init", help="write a commented example config")
    q.add_argument("dir", nargs="?", default=".", help="folder for pfcrig.toml (default: here)")
    q.add_argument("--force", action="store_true", help="overwrite an existing pfcrig.toml")
    q.set_defaults(func=init)


def init(args: argparse.Namespace) -> int:
    out = Path(args.dir)
    target = out / "pfcrig.toml"
    if target.exists() and not args.force:
        raise ConfigError(f"{target}: exists already (use --force to overwrite)")
    out.mkdir(parents=True, exist_ok=True)
    text = (
        resources.files("harness").joinpath("data/universal_1k5.toml").read_text(encoding="utf-8")
    )
    target.write_text(text, encoding="utf-8")
    print(f"wrote {target}")
    print(f"next: pfcrig design {target}")
    return 0
