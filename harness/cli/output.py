"""What the run-like commands share: JSON reports (non-finite floats as null) and the
scenario a command was given."""

from __future__ import annotations

import json
import math
import sys
from dataclasses import replace
from typing import IO, Any

from codegen.files import atomic_path
from design.project import Project
from harness.closedloop.loop import RECORD_BYTES_PER_PERIOD
from harness.closedloop.scenario import Scenario, default_for
from harness.closedloop.scenario import load as load_scenario

from .checks import UsageError, run_length


def dump_json(obj: Any, fh: IO[str] | None = None) -> None:
    out = fh or sys.stdout
    json.dump(obj, out, indent=2, sort_keys=True, default=_jsonable)
    out.write("\n")


def write_json(path: str, doc: Any) -> None:
    """Write a report as JSON (non-finite floats as null) and say so."""
    with atomic_path(path) as tmp, open(tmp, "w") as fh:
        dump_json(clean(doc), fh)
    print(f"wrote {path}")


def scenario_of(args: Any, prj: Project, default_duration_s: float) -> Scenario:
    """The scenario a run-like command was given (or the nominal one), with --duration applied."""
    scn = (
        load_scenario(args.scenario)
        if args.scenario
        else default_for(prj.config.spec, default_duration_s)
    )
    scn = replace(scn, duration_s=args.duration) if args.duration is not None else scn
    late = [ev.t_s for ev in scn.events if ev.t_s >= scn.duration_s]
    if late:
        raise UsageError(
            f"--duration {scn.duration_s:g} s ends before the scenario's event at {late[0]:g} s"
        )
    run_length(scn.duration_s, prj.config.spec.fsw, 1, RECORD_BYTES_PER_PERIOD)
    return scn


def _jsonable(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if hasattr(x, "item"):
        return x.item()
    raise TypeError(f"not JSON: {type(x)}")


def clean(obj: Any) -> Any:
    """Non-finite floats become null (JSON has no inf/nan)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [clean(v) for v in obj]
    return obj
