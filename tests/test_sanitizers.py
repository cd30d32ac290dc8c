"""The generated C under gcc's address and undefined-behaviour sanitizers, driven by
hypothesis-drawn ADC sequences (railed, stuck, glitching, any code) in both number formats:
no undefined behaviour, no out-of-bounds access, every output within the contract."""

from __future__ import annotations

import shutil
import struct
import subprocess
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from codegen.render import render
from design.config import from_dict, read_toml
from design.project import from_config

from .helpers import DEMO

DRIVER = Path(__file__).with_name("c") / "adc_driver.c"
FLAGS = ["-std=c99", "-O1", "-g", "-fsanitize=address,undefined", "-fno-sanitize-recover=all"]


def _sanitizers_work(tmp: Path) -> bool:
    src = tmp / "probe.c"
    src.write_text("int main(void) { return 0; }\n")
    r = subprocess.run(["gcc", *FLAGS, str(src), "-o", str(tmp / "probe")], capture_output=True)
    return r.returncode == 0 and subprocess.run([str(tmp / "probe")]).returncode == 0


@pytest.fixture(scope="module", params=["float32", "q15"])
def driver(request, tmp_path_factory):
    if shutil.which("gcc") is None:
        pytest.skip("gcc not installed")
    tmp = tmp_path_factory.mktemp(f"san_{request.param}")
    if not _sanitizers_work(tmp):
        pytest.skip("gcc's address/undefined sanitizers do not run here (libasan, libubsan)")
    raw = read_toml(DEMO)
    raw.setdefault("control", {})["number_format"] = request.param
    prj = from_config(from_dict(raw, str(DEMO)))
    p = prj.config.control.prefix
    for name, text in render(prj).items():
        (tmp / name).write_text(text)
    main = DRIVER.read_text().replace("DRIVER_PREFIX_UPPER", p.upper()).replace("DRIVER_PREFIX", p)
    (tmp / "driver.c").write_text(main)
    sources = [str(f) for f in tmp.glob("*.c") if f.name != "probe.c"]
    exe = tmp / "driver"
    r = subprocess.run(["gcc", *FLAGS, f"-I{tmp}", *sources, "-o", str(exe)], capture_output=True)
    assert r.returncode == 0, r.stderr.decode()
    return exe


code = st.integers(0, 65535)
run = st.tuples(st.tuples(code, code, code), st.integers(1, 400))  # a record held for n periods


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(runs=st.lists(run, min_size=1, max_size=40))
def test_any_adc_sequence_runs_clean_under_the_sanitizers(driver, runs):
    data = b"".join(struct.pack("<3H", *rec) * n for rec, n in runs)
    r = subprocess.run([str(driver)], input=data, capture_output=True, timeout=60)
    assert r.returncode == 0, r.stderr.decode()[-2000:]
