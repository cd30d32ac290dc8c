"""``pfcrig init``: an example config with every key the config accepts, each with its unit,
its meaning and its default; keys derived from the sizing are written commented out, with
the value ``pfcrig design`` derives for this example (unless the example sets them)."""

from __future__ import annotations

import argparse
from importlib import resources
from pathlib import Path
from typing import Any

from codegen.files import atomic_path
from design.config import ConfigError, load
from design.project import from_config
from design.schema import SCHEMA

from . import checks

HEADER = """# pfcrig config: 1.5 kW universal-input totem-pole PFC front end (demo scenario).
# Units are SI (V, A, W, Hz, H, F, s, ohm); fractions are plain numbers (0.3 = 30 %).
# Every key is listed with its unit and default; a commented key is derived by
# `pfcrig design` (the value shown is what it derives for this example).
#
# CAUTION: a 400 V bus kills. This is reference material, to be validated on hardware by
# qualified people; local electrical codes and licensed practice take precedence.
"""
# keys derived from the sizing, and where design puts the derived value
DERIVED = {
    ("plant", "inductance"): "inductance_H",
    ("plant", "capacitance"): "capacitance_F",
    ("plant", "node_capacitance"): "node_capacitance_F",
    ("plant", "slow_node_capacitance"): "slow_node_capacitance_F",
    ("plant", "core_volume"): "core_volume_m3",
    ("plant", "dm_damping"): "dm_damping_ohm",
    ("control", "current_bandwidth"): "current_bandwidth_Hz",
    ("control", "ff_corner"): "ff_corner_Hz",
    ("control", "zc_hysteresis"): "zc_hysteresis_V",
    ("control", "zc_debounce_periods"): "zc_debounce_periods",
    ("control", "zc_blank_voltage"): "zc_blank_V",
    ("protection", "ov_trip"): "ov_trip_V",
    ("protection", "oc_trip"): "oc_trip_A",
    ("protection", "hw_ov_level"): "hw_ov_level_V",
    ("protection", "device_current_limit"): "device_current_A",
    ("protection", "brownout_off_rms"): "brownout_off_rms_V",
    ("protection", "brownout_on_rms"): "brownout_on_rms_V",
    ("sensing", "vac_range"): "vac_range_V",
    ("sensing", "il_range"): "il_range_A",
    ("sensing", "vbus_range"): "vbus_range_V",
    ("sensing", "ln_range"): "ln_range_V",
    ("sensing", "vac_offset"): "vac_offset_counts",
    ("sensing", "il_offset"): "il_offset_counts",
}


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("init", help="write an example config with every key, unit and default")
    q.add_argument("dir", nargs="?", default=".", help="folder for pfcrig.toml (default: here)")
    q.add_argument("--force", action="store_true", help="overwrite an existing pfcrig.toml")
    q.set_defaults(func=init)


def _value(v: Any) -> str:
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, float):
        return f"{v:.6g}" if ("e" in f"{v:.6g}" or "." in f"{v:.6g}") else f"{v:.6g}.0"
    return str(v)


def example_text() -> str:
    """The example config: the shipped demo's values, every other key at its default."""
    src = resources.files("harness").joinpath("data/universal_1k5.toml")
    with resources.as_file(src) as path:
        cfg = load(path)
    prj = from_config(cfg)
    derived = prj.resolved.as_dict()
    lines = [HEADER]
    for table, keys in SCHEMA.items():
        lines.append(f"[{table}]")
        values = getattr(cfg, table)
        for name, k in keys.items():
            unit = f"{k.unit}, " if k.unit and k.unit != "1" else ""
            choices = f" ({' or '.join(k.choices)})" if k.choices else ""
            if (table, name) in DERIVED and getattr(values, name) is None:
                shown = derived[DERIVED[(table, name)]]
                shown = shown if isinstance(shown, int) else float(shown)
                lines.append(f"# {name} = {_value(shown)}  # {unit}{k.doc}")
                continue
            v = getattr(values, name)
            default = "" if k.required or k.default is None else f"; default {_value(k.default)}"
            lines.append(f"{name} = {_value(v)}  # {unit}{k.doc}{choices}{default}")
        lines.append("")
    return "\n".join(lines)


def init(args: argparse.Namespace) -> int:
    checks.output_dir(args.dir, "init folder")
    out = Path(args.dir)
    target = out / "pfcrig.toml"
    if target.exists() and not args.force:
        raise ConfigError(f"{target}: exists already (use --force to overwrite)")
    out.mkdir(parents=True, exist_ok=True)
    with atomic_path(target) as tmp:
        tmp.write_text(example_text(), encoding="utf-8")
    print(f"wrote {target}")
    print(f"next: pfcrig design {target}")
    return 0
