"""Sub-commands of ``pfcrig`` other than ``init``."""
from __future__ import annotations

import argparse
import json
import sys

from .project import load_project
from .tables import format_table


def dump_json(obj, fh=None) -> None:
    out = fh or sys.stdout
    json.dump(obj, out, indent=2, sort_keys=True)
    out.write("\n")


def design(args: argparse.Namespace) -> int:
    prj = load_project(args.config)
    doc = {**prj.sizing.as_dict(), **{f"resolved_{k}": v for k, v in prj.resolved.as_dict().items()}}
    doc["config_digest"] = prj.config.digest()
    if args.json:
        dump_json(doc)
        return 0
    print(f"pfcrig design: {prj.config.source} (digest {prj.config.digest()})\n")
    print("Power stage at vin_rms_min, full power")
    print(format_table(["quantity", "value", "unit", "formula", "source"],
                       [(k, f"{v:.4g}", u, f, src) for k, v, u, f, src in prj.sizing.rows()]))
    print("\nDerived settings")
    print(format_table(["setting", "value"], [(k, f"{v:.4g}") for k, v in prj.resolved.as_dict().items()]))
    return 0


def register(sub) -> None:
    """Add the commands built so far."""
