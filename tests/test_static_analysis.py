"""Static analysis of the generated C: cppcheck (Debian's package) clean over the controller
and the target shell in both number formats, with the configuration stated in the README;
and the float build refusing -ffast-math at compile time."""

from __future__ import annotations

import shutil
import subprocess

import pytest

from codegen.build import HOST_FLAGS, BuildError, compile_objects
from codegen.render import render, render_link
from design.project import from_config

CPPCHECK = shutil.which("cppcheck")
# the configuration the README states: every check but the informational ones, C99, inline
# suppressions (each with its reason beside it in the template)
CPPCHECK_ARGS = [
    "--enable=warning,style,performance,portability",
    "--std=c99",
    "--error-exitcode=1",
    "--inline-suppr",
    "--quiet",
]


def _write(files: dict[str, str], d) -> None:
    d.mkdir(parents=True, exist_ok=True)
    for n, t in files.items():
        (d / n).write_text(t)


def _cppcheck(d) -> subprocess.CompletedProcess:
    assert CPPCHECK is not None
    return subprocess.run(
        [CPPCHECK, *CPPCHECK_ARGS, "-I", str(d), str(d)], capture_output=True, text=True
    )


@pytest.mark.skipif(not CPPCHECK, reason="cppcheck not installed (Debian: cppcheck)")
@pytest.mark.parametrize("fmt", ["float32", "q15"])
def test_cppcheck_clean(demo_project, fmt, tmp_path):
    prj = from_config(demo_project.config.replace("control", number_format=fmt))
    files = {**render(prj), **render_link(prj)}
    _write(files, tmp_path / "src")
    r = _cppcheck(tmp_path / "src")
    assert r.returncode == 0 and not r.stderr.strip(), r.stderr


@pytest.mark.skipif(not CPPCHECK, reason="cppcheck not installed (Debian: cppcheck)")
def test_cppcheck_configuration_finds_a_planted_defect(tmp_path):
    """The same configuration is not blind: a variable whose scope can be reduced (the style
    finding the generator had) and an out-of-bounds index both fail it."""
    d = tmp_path / "src"
    d.mkdir()
    (d / "x.c").write_text(
        "int f(int c) { int k; int a[4] = {0}; if (c) { k = a[4]; return k; } return 0; }\n"
    )
    assert _cppcheck(d).returncode == 1


def test_float_build_refuses_fast_math(demo_project, tmp_path):
    """-ffast-math lets the compiler assume no NaN and drop the non-finite checks
    (x == x); the float32 build stops with the reason, the q15 build (no float) compiles."""
    _write(render(demo_project), tmp_path / "f32")
    with pytest.raises(BuildError, match="IEEE comparisons"):
        compile_objects(tmp_path / "f32", tmp_path / "o1", flags=[*HOST_FLAGS, "-ffast-math"])
    q15 = from_config(demo_project.config.replace("control", number_format="q15"))
    _write(render(q15), tmp_path / "q15")
    assert compile_objects(tmp_path / "q15", tmp_path / "o2", flags=[*HOST_FLAGS, "-ffast-math"])
