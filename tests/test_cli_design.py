"""`pfcrig init` then `pfcrig design --json` from the command line."""

from __future__ import annotations

import json
import subprocess
import sys

KEYS = [
    "il_rms_A",
    "il_peak_A",
    "ripple_pp_A",
    "inductance_H",
    "capacitance_ripple_F",
    "capacitance_holdup_F",
    "capacitance_F",
]


def pfcrig(*args, cwd=None):
    return subprocess.run(
        [sys.executable, "-m", "harness.cli", *args], capture_output=True, text=True, cwd=cwd
    )


def test_init_then_design_json(tmp_path):
    r = pfcrig("init", str(tmp_path / "d"))
    assert r.returncode == 0, r.stderr
    cfg = tmp_path / "d" / "pfcrig.toml"
    r = pfcrig("design", str(cfg), "--json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    for k in KEYS:
        assert isinstance(doc[k], float) and doc[k] >= 0.0
    assert doc["capacitance_F"] == max(doc["capacitance_ripple_F"], doc["capacitance_holdup_F"])


def test_init_refuses_to_overwrite(tmp_path):
    assert pfcrig("init", str(tmp_path)).returncode == 0
    r = pfcrig("init", str(tmp_path))
    assert r.returncode == 2 and "exists already" in r.stderr


def test_design_table_names_units_and_sources(tmp_path):
    pfcrig("init", str(tmp_path))
    r = pfcrig("design", str(tmp_path / "pfcrig.toml"))
    assert r.returncode == 0
    assert "inductance_H" in r.stdout and "Erickson" in r.stdout and "Vo/(4 fsw di_pp)" in r.stdout


def test_init_writes_every_key_and_the_demo(tmp_path):
    """Every key of the schema is in the written file (derived ones commented, with the value
    `pfcrig design` derives), and the file is the shipped demo config value for value."""
    import re

    from design.config import load
    from design.project import load_project
    from design.schema import SCHEMA

    from .helpers import DEMO

    assert pfcrig("init", str(tmp_path)).returncode == 0
    text = (tmp_path / "pfcrig.toml").read_text()
    for table, keys in SCHEMA.items():
        body = text.split(f"[{table}]")[1].split("\n[")[0]
        for name in keys:
            assert re.search(rf"^(# )?{name} = ", body, re.M), (table, name)
    assert load(tmp_path / "pfcrig.toml").digest() == load(DEMO).digest()
    derived = load_project(DEMO).resolved
    shown = float(re.search(r"^# oc_trip = (\S+)", text, re.M).group(1))
    assert shown == float(f"{derived.oc_trip_A:.6g}")
