"""Board projects (``pfcrig generate --board``): both boards build with their own Makefile,
boot on QEMU and run the lockstep link with every output equal to the in-process run
(float32 on the Cortex-M4F of mps2-an386, q15 on the Cortex-M3 of mps2-an385), with the line
read on one bipolar channel or as L and N apart (``[sensing] line = "split"``)."""

from __future__ import annotations

import shutil
import subprocess

import pytest

from codegen import target
from design.project import from_config
from harness.cli import main
from harness.closedloop.loop import run
from harness.closedloop.scenario import Scenario
from harness.targets.pil import compare_outputs, qemu_transport, run_over

from .helpers import DEMO

BOARDS = [("mps2-an386", "float32"), ("mps2-an385", "q15")]
TOOLS = target.available() and shutil.which("make") and shutil.which("qemu-system-arm")


def test_board_list_and_refusals(demo_path, tmp_path, capsys):
    assert main(["generate", str(demo_path), "--board", "list"]) == 0
    out = capsys.readouterr().out
    assert "mps2-an386" in out and "mps2-an385" in out
    assert main(["generate", str(demo_path), "-o", str(tmp_path / "x"), "--board", "nope"]) == 2
    assert "one of mps2-an386, mps2-an385" in capsys.readouterr().err
    # the demo is float32: the Cortex-M3 board has no FPU
    assert (
        main(["generate", str(demo_path), "-o", str(tmp_path / "y"), "--board", "mps2-an385"]) == 2
    )
    assert "runs q15" in capsys.readouterr().err
    assert not (tmp_path / "y").exists()


@pytest.mark.slow
@pytest.mark.skipif(not TOOLS, reason="needs arm-none-eabi-gcc, make and qemu-system-arm")
@pytest.mark.parametrize(
    "board,fmt,line", [(b, f, "bipolar") for b, f in BOARDS] + [("mps2-an385", "q15", "split")]
)
def test_board_project_builds_boots_and_equals_the_in_process_run(
    demo_project, tmp_path, board, fmt, line
):
    cfg0 = demo_project.config.replace("control", number_format=fmt)
    prj = from_config(cfg0.replace("sensing", line=line))
    cfg = tmp_path / "cfg.toml"
    text = DEMO.read_text().replace('number_format = "float32"', f'number_format = "{fmt}"')
    assert "adc_bits = 12\n" in text
    cfg.write_text(text.replace("adc_bits = 12\n", f'adc_bits = 12\nline = "{line}"\n'))
    out = tmp_path / "fw"
    assert main(["generate", str(cfg), "-o", str(out), "--board", board]) == 0
    for f in ("Makefile", "CMakeLists.txt", "README.md", "pfc_board_port.h", "pfc_isr.c"):
        assert (out / f).is_file(), f
    r = subprocess.run(["make", "-C", str(out), "-j2"], capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    assert (out / "pfc_isr.o").is_file() and list(out.glob("*.su"))
    readme = (out / "README.md").read_text()
    for c in (
        "cannot protect GaN or SiC",
        "bleeder",
        "isolated, current-limited",
        "not qualified safety software",
        "Bring-up order",
    ):
        assert c in readme, c
    elf = out / "pfc_pil.elf"
    s = Scenario(
        duration_s=0.04, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    pil = run_over(prj, s, qemu_transport(elf, board), elf)
    ref = run(prj, [s], progress=False)
    cmp = compare_outputs(ref, pil.result)
    assert cmp.equal, cmp
    assert pil.result.extras["final_states"][0] == ref.extras["final_states"][0]
    if not shutil.which("cmake"):
        pytest.skip("cmake not installed: the CMakeLists.txt build is not checked")
    # the CMakeLists.txt builds the same image: it boots and equals the in-process run too
    build = tmp_path / "cmake-build"
    for cmd in (["cmake", "-S", str(out), "-B", str(build)], ["cmake", "--build", str(build)]):
        r = subprocess.run(cmd, capture_output=True, text=True)
        assert r.returncode == 0, r.stdout + r.stderr
    elf2 = build / "pfc_pil.elf"
    assert elf2.is_file() and (build / "CMakeFiles").is_dir()
    pil2 = run_over(prj, s, qemu_transport(elf2, board), elf2)
    assert compare_outputs(ref, pil2.result).equal
