"""The board contract (``<prefix>_board.h``): it builds in both formats, its up-down compare
macro gives the on-time the controller asks for, it carries the bring-up cautions, and the
plant follows the timing it states (the ADC at mid-period reads the period's average current,
as a centre-aligned carrier gives in continuous conduction)."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest

from codegen.build import HOST_FLAGS, STRICT_FLAGS
from codegen.render import render
from design.contract import Mode, timing
from design.project import from_config
from harness.closedloop.loop import run
from harness.closedloop.scenario import Scenario

CAUTIONS = [
    "cycle-by-cycle current limit or desaturation detection",
    "over-voltage comparator on the bus, independent of the controller's ADC",
    "gate drives that default off through MCU reset",
    "bleeder",
    "isolated, current-limited source with differential probes",
    "disconnect\n * the gate drivers while the serial target shell",
    "not a compliance result",
    "not qualified\n * safety software",
]


@pytest.mark.parametrize("fmt", ["float32", "q15"])
@pytest.mark.parametrize("carrier", ["centre", "edge"])
def test_board_header_builds_and_its_compare_gives_the_on_time(
    demo_project, fmt, carrier, tmp_path
):
    """For every compare 0..PWM_PERIOD_COUNTS, the on-time the carrier's register gives (twice
    the up-down register, on for CCR counts at each end of the period; the edge-aligned
    register itself) is the asked on-time to within one count (the rounding of an odd count),
    and the ADC trigger sits at the middle of the low switch's on-time (the edge-aligned
    carrier: half the compare, to a count) or at the counter's top (centre-aligned), computed
    by the C itself."""
    prj = from_config(demo_project.config.replace("control", number_format=fmt, carrier=carrier))
    edge = carrier == "edge"
    for n, t in render(prj).items():
        (tmp_path / n).write_text(t)
    on = "PFC_BOARD_CCR(c)" if edge else "2u * PFC_BOARD_UPDOWN_CCR(c)"
    mid = "2u * PFC_BOARD_ADC_CCR(c)" if edge else "c"  # centre: the top, whatever c
    top = "PFC_BOARD_EDGE_TOP" if edge else "PFC_BOARD_UPDOWN_TOP"
    # centre-aligned: the ADC trigger is the counter's top whatever the compare
    top_check = (
        "" if edge else "        if (PFC_BOARD_ADC_CCR(c) != PFC_BOARD_UPDOWN_TOP) return 2;\n"
    )
    (tmp_path / "main.c").write_text(
        '#include <stdio.h>\n#include "pfc_board.h"\n'
        "int main(void) {\n    unsigned c, worst = 0u, worst_adc = 0u;\n"
        "    for (c = 0u; c <= PFC_PWM_PERIOD_COUNTS; c++) {\n"
        f"        unsigned on = {on};\n"
        f"        unsigned mid = {mid};\n"
        "        unsigned err = (on > c) ? on - c : c - on;\n"
        "        unsigned err_adc = (mid > c) ? mid - c : c - mid;\n"
        "        worst = (err > worst) ? err : worst;\n"
        "        worst_adc = (err_adc > worst_adc) ? err_adc : worst_adc;\n"
        f"{top_check}"
        "    }\n"
        f'    printf("%u %u %u %u\\n", worst, worst_adc, (unsigned){top}, '
        "(unsigned)PFC_BOARD_DEAD_TIME_COUNTS);\n    return 0;\n}\n"
    )
    exe = tmp_path / "board"
    subprocess.run(
        ["gcc", *STRICT_FLAGS, *HOST_FLAGS, "-I", str(tmp_path), str(tmp_path / "main.c"),
         "-o", str(exe)],
        check=True,
    )  # fmt: skip
    res = subprocess.run([str(exe)], capture_output=True, text=True)
    assert res.returncode == 0, res
    worst, worst_adc, top_counts, dead = map(int, res.stdout.split())
    counts = prj.resolved.pwm_period_counts
    assert worst <= 1
    assert worst_adc <= 1
    if edge:
        assert top_counts == counts - 1
    else:
        assert 2 * top_counts in (counts, counts - 1)
    cfg = prj.config
    assert dead == round(cfg.plant.dead_time * cfg.control.pwm_timer_clock)


def test_board_header_carries_the_cautions(demo_project):
    text = render(demo_project)["pfc_board.h"]
    for c in CAUTIONS:
        assert c in text, c


@pytest.mark.parametrize("carrier", ["centre", "edge"])
def test_plant_follows_the_board_timing(demo_project, carrier):
    """The sample is where the board's ADC is triggered (the contract's TIMINGS): centre-aligned
    at mid-period, edge-aligned at half the low switch's on-time. In steady continuous
    conduction either is the period's average current (hand arithmetic: centre-aligned, the
    current rises d T/2 at each end and falls in the middle, so its value at T/2 equals the
    period's mean; edge-aligned, the sample is the middle of a straight ramp, whose value is
    the ramp's mean, and the falling ramp's mean is the same in steady state), where a sample
    at the period's start would read a ripple extreme. Measured on the plant: within 5 % of the
    ripple, away from the crossings."""
    t = timing(carrier)
    assert t["sample"] == ("half the low switch's on-time" if carrier == "edge" else "counter top")
    prj = from_config(demo_project.config.replace("control", carrier=carrier))
    s = Scenario(
        duration_s=0.3, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    d = run(prj, [s], progress=False).lane(0)
    vpk = np.sqrt(2.0) * 230.0
    m = (d["mode"] == Mode.RUN) & (np.abs(d["vs_V"]) > 0.5 * vpk) & (d["t_s"] > 0.2)
    assert m.sum() > 1000
    ripple = np.median((d["i_max_A"] - d["i_min_A"])[m])
    assert np.abs(d["i_sample_A"][m] - d["i_avg_A"][m]).max() < 0.05 * ripple
