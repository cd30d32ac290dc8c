"""The interrupt's budget: the worst-case stack over the step's call tree from GCC's
call-graph dumps, and the step's measured instructions as a share of the PWM period."""

from __future__ import annotations

import shutil

import pytest

from codegen import target
from codegen.render import render
from codegen.stack import worst_case
from harness.cli.pil_cmd import isr_budget

CI = """graph: { title: "x.c"
node: { title: "f_step" label: "f_step\\nx.c:1:6\\n24 bytes (static)" }
node: { title: "a" label: "a\\nx.c:2:6\\n16 bytes (static)" }
node: { title: "b" label: "b\\nx.c:3:6\\n32 bytes (static)" }
node: { title: "c" label: "c\\nx.c:4:6\\n8 bytes (static)" }
node: { title: "__aeabi_ldivmod" label: "__aeabi_ldivmod\\nx.c:5:6" shape : ellipse }
edge: { sourcename: "f_step" targetname: "a" label: "x.c:1:1" }
edge: { sourcename: "f_step" targetname: "b" label: "x.c:1:2" }
edge: { sourcename: "b" targetname: "c" label: "x.c:3:1" }
edge: { sourcename: "a" targetname: "__aeabi_ldivmod" label: "x.c:2:1" }
}
"""


def test_worst_case_stack_of_a_call_tree(tmp_path):
    """Hand arithmetic: f_step (24) -> a (16) = 40; f_step -> b (32) -> c (8) = 64, the worst;
    a library callee has no frame here and is listed."""
    (tmp_path / "x.ci").write_text(CI)
    r = worst_case([tmp_path / "x.ci"], "f_step")
    assert r.bytes == 64 and r.path == ["f_step", "b", "c"]
    assert r.unknown == ["__aeabi_ldivmod"]
    (tmp_path / "y.ci").write_text(
        CI + 'edge: { sourcename: "c" targetname: "f_step" label: "x.c:4:1" }\n'
    )
    with pytest.raises(ValueError, match="recursion"):
        worst_case([tmp_path / "y.ci"], "f_step")


def test_isr_budget_arithmetic(demo_project):
    """At the demo's 65 kHz and the default 120 MHz core clock a period is 1846.15 cycles:
    600 instructions are 32.5 % of it and 65 % of the half period the step has."""
    b = isr_budget(demo_project, "host", 600.0)
    per = demo_project.config.target.core_clock_hz / demo_project.config.spec.fsw
    assert per == pytest.approx(120e6 / 65e3)
    assert b["cycles_pct_of_period"] == pytest.approx(100 * 600 / per)
    assert b["cycles_pct_of_half_period"] == pytest.approx(200 * 600 / per)
    assert b["stack_bytes"] is None  # a host process: no core to analyse


@pytest.mark.skipif(not target.available(), reason="arm-none-eabi-gcc not installed")
def test_cross_compile_reports_the_step_stack(demo_project):
    rep = target.check(render(demo_project), "pfc", "cortex-m4f")
    assert rep.stack is not None and rep.stack.path[0] == "pfc_step"
    assert 0 < rep.stack.bytes < 1024  # the contract: no recursion, no large locals
    assert rep.as_dict()["stack_bytes"] == rep.stack.bytes


@pytest.mark.slow
@pytest.mark.skipif(
    not (target.available() and shutil.which("qemu-system-arm")),
    reason="needs arm-none-eabi-gcc and qemu-system-arm",
)
def test_check_target_refuses_a_step_that_overruns_its_half_period(tmp_path, capsys):
    """q15 on the Cortex-M3 at 100 kHz and 120 MHz: 1200 cycles a period, 600 from the ADC
    trigger to the update; the step's worst case (about 800 instructions measured) does not
    fit even as a lower bound, and --check-target says so and fails."""
    from harness.cli import main

    from .helpers import DEMO

    text = DEMO.read_text().replace('number_format = "float32"', 'number_format = "q15"')
    text = text.replace("fsw = 65000.0", "fsw = 100000.0")
    assert 'number_format = "q15"' in text and "fsw = 100000.0" in text
    cfg = tmp_path / "c.toml"
    cfg.write_text(text)
    assert main(["generate", str(cfg), "-o", str(tmp_path / "o"), "--check-target"]) == 1
    assert "DO NOT FIT" in capsys.readouterr().out
