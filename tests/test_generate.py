"""Generated sources: deterministic bytes, strict warnings-as-errors builds, cross-compile check."""

from __future__ import annotations

import subprocess
import sys

import pytest

from codegen import target
from codegen.build import BuildError, build, compile_objects
from codegen.render import render
from design.project import load_project

from .helpers import DEMO, EXAMPLES

CONFIGS = [DEMO, EXAMPLES / "telecom_3k3.toml", EXAMPLES / "appliance_1k2.toml"]


def test_generate_twice_identical_bytes(tmp_path):
    for out in ("a", "b"):
        r = subprocess.run(
            [sys.executable, "-m", "harness.cli", "generate", str(DEMO), "-o", str(tmp_path / out)],
            capture_output=True,
            text=True,
        )
        assert r.returncode == 0, r.stderr
    a = sorted((tmp_path / "a").iterdir())
    b = sorted((tmp_path / "b").iterdir())
    assert [p.name for p in a] == [p.name for p in b] and len(a) > 10
    for x, y in zip(a, b, strict=True):
        assert x.read_bytes() == y.read_bytes()


def test_headers_carry_caution_digest_and_units():
    prj = load_project(DEMO)
    files = render(prj)
    for name, text in files.items():
        assert "CAUTION" in text and "lethal" in text and prj.config.digest() in text, name
    cfg = files["pfc_config.h"]
    # every constant has its unit and origin on the line above it
    lines = cfg.splitlines()
    for k, ln in enumerate(lines):
        if ln.startswith("#define PFC_") and not ln.startswith("#define PFC_CONFIG_H"):
            assert (
                lines[k - 1].startswith("/*") and "[" in lines[k - 1] and "from" in lines[k - 1]
            ), ln


@pytest.mark.parametrize("cfg", CONFIGS, ids=lambda p: p.stem)
def test_strict_host_build(cfg, tmp_path):
    prj = load_project(cfg)
    files = render(prj)
    src = tmp_path / "src"
    src.mkdir()
    for n, t in files.items():
        (src / n).write_text(t)
    objs = compile_objects(src, tmp_path / "obj")
    assert len(objs) == sum(1 for n in files if n.endswith(".c"))


@pytest.mark.parametrize(
    "snippet,warning",
    [
        ("float f(float x) { return x * 2.0; }", "double-promotion"),
        ("int g; int f(int x) { int g = x; return g; }", "shadow"),
        ("#include <stdint.h>\nuint8_t f(uint32_t x) { return x; }", "conversion"),
    ],
)
def test_strict_flags_reject_what_the_contract_forbids(snippet, warning, tmp_path):
    """gcc itself, with the flags every generated file is built with, refuses code that the
    C contract rules out (float promoted to double, shadowed names, narrowing)."""
    (tmp_path / "x.c").write_text(snippet + "\n")
    with pytest.raises(BuildError, match=warning):
        compile_objects(tmp_path, tmp_path / "obj")


def test_headers_compile_as_cplusplus(demo_project, tmp_path):
    """Every public header carries extern "C" guards: a C++ translation unit that includes
    them refers to the C symbols (g++ mangles nothing inside the guards)."""
    import shutil

    if shutil.which("g++") is None:
        pytest.skip("g++ not installed")
    for n, t in render(demo_project).items():
        (tmp_path / n).write_text(t)
    (tmp_path / "t.cpp").write_text(
        '#include "pfc_ctrl.h"\nvoid use(pfc_ctrl_t *c) { pfc_init(c); }\n'
    )
    r = subprocess.run(
        [
            "g++",
            "-std=c++11",
            "-c",
            "-I",
            str(tmp_path),
            str(tmp_path / "t.cpp"),
            "-o",
            str(tmp_path / "t.o"),
        ],
        capture_output=True,
        text=True,
    )
    assert r.returncode == 0, r.stderr
    nm = subprocess.run(["nm", str(tmp_path / "t.o")], capture_output=True, text=True).stdout
    assert " U pfc_init" in nm  # the C name, not a mangled C++ one


def test_compiler_error_shows_generated_line(tmp_path):
    files = {"bad_x.c": "#include <stdint.h>\nuint8_t f(uint32_t x) { return x; }\n"}
    with pytest.raises(BuildError) as ei:
        build(files, "bad")
    msg = str(ei.value)
    assert (
        "bad_x.c" in msg
        and "conversion" in msg
        and "generated line bad_x.c:2: uint8_t f(uint32_t x) { return x; }" in msg
    )


def test_no_double_no_libm_no_heap_in_sources():
    files = render(load_project(DEMO))
    import re

    for name, text in files.items():
        body = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
        assert not re.search(r"\bdouble\b", body), name
        assert not re.search(
            r"\b(malloc|calloc|free|sqrtf?|sinf?|cosf?|fabsf?|expf?|logf?|powf?)\s*\(", body
        ), name
        assert "#include <math.h>" not in body and "#include <stdlib.h>" not in body, name


@pytest.mark.skipif(
    not target.available(), reason="arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)"
)
@pytest.mark.parametrize("cfg", CONFIGS, ids=lambda p: p.stem)
def test_cortex_m4f_cross_compile(cfg):
    prj = load_project(cfg)
    rep = target.check(render(prj), prj.config.control.prefix, "cortex-m4f")
    assert rep.undefined == [], (
        rep.undefined
    )  # no libm, no allocator, nothing outside the generated code
    assert rep.flash_B <= target.FLASH_LIMIT_B, rep.flash_B
    assert rep.state_B <= target.STATE_LIMIT_B, rep.state_B
    assert rep.ram_B == 0  # all state lives in the caller's controller struct


@pytest.mark.skipif(
    not target.available(), reason="arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)"
)
def test_generate_check_target_cli(tmp_path):
    r = subprocess.run(
        [
            sys.executable,
            "-m",
            "harness.cli",
            "generate",
            str(DEMO),
            "-o",
            str(tmp_path),
            "--check-target",
        ],
        capture_output=True,
        text=True,
    )
    assert r.returncode == 0, r.stdout + r.stderr
    assert "cortex-m4f" in r.stdout and "sizeof ctrl" in r.stdout
