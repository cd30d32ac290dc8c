"""Two controller mutants (rendered from patched templates, ``tests/helpers.py``) against the
block checks that see them: without the duty ramp after a crossing, and without the floor
under the mean square before 1/Vrms^2; and the one case of the fault campaigns that tells
the first from the shipped controller (the appliance example's sensor-fault campaign, seed
91: 1 of 500 cases); and, for the second, the check that it is an equivalent mutant of the
whole controller: on the line cases that take the mean square under the floor its gates and
compares are the shipped controller's bit for bit, so no invariant on the power stage can
tell it apart (README "The slow leg's midpoint").

Sources: the ramp's limit d_k = k / ZC_RAMP_PERIODS x DUTY_MAX (its definition in the config
header); a sine of amplitude A has a half-cycle mean square A^2 / 2 (analytic)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from codegen.build import build_project
from design.contract import Mode
from design.project import load_project
from harness.campaigns import fuzz
from harness.closedloop import loop, scenario

from .helpers import EXAMPLES, ROOT, broken_loader, consts
from .test_c_blocks import FSW, run_rms, wave


@pytest.fixture(scope="module")
def no_ramp(demo_project):
    return build_project(demo_project, broken_loader("no_zc_ramp"))


@pytest.fixture(scope="module")
def no_floor(demo_project):
    return build_project(demo_project, broken_loader("no_ms_floor"))


def ramp_limits(built, periods):
    """The main switch's duty limit in the first periods of a half, from reset."""
    ffi, lib = built.ffi, built.lib
    s = ffi.new("pfc_pwmgen_t*")
    out = ffi.new("pfc_pwm_t*")
    lib.pfc_pwmgen_init(s)
    limits = []
    for _ in range(periods):
        limits.append(lib.pfc_pwmgen_limit(s))
        lib.pfc_pwmgen_step(s, 0.9, 1, True, 0.0, out)
    return limits


def test_duty_ramp_check_tells_the_mutant(demo_project, demo_built, no_ramp):
    c = consts(demo_project)
    n = int(c["ZC_RAMP_PERIODS"])
    step = c["DUTY_MAX"] / n
    shipped = ramp_limits(demo_built, n + 2)
    assert shipped[: n + 1] == pytest.approx([k * step for k in range(n + 1)], rel=1e-5)
    assert shipped[-1] == pytest.approx(c["DUTY_MAX"], rel=1e-6)
    mutant = ramp_limits(no_ramp, n + 2)
    assert mutant[0] == pytest.approx(c["DUTY_MAX"], rel=1e-6)  # full duty at once


def test_mean_square_floor_check_tells_the_mutant(demo_project, demo_built, no_floor):
    """A small line, under the floor but still a line: the shipped block latches 1/floor,
    the mutant 1/ms, which the floor exists to bound (2 / A^2 for amplitude A)."""
    c = consts(demo_project)
    amp = 30.0
    assert amp * amp / 2.0 < c["MS_FLOOR_V2"]
    _, _, tiny = wave(amp, 50.0, 0.0, int(4 * FSW / 50))
    shipped, _ = run_rms(demo_built, tiny)
    assert shipped[-1][3] == pytest.approx(1.0 / c["MS_FLOOR_V2"], rel=1e-6)
    mutant, _ = run_rms(no_floor, tiny)
    assert mutant[-1][3] == pytest.approx(2.0 / amp**2, rel=0.05)
    assert mutant[-1][3] > 2.0 / c["MS_FLOOR_V2"]
    assert math.isfinite(float(np.float64(mutant[-1][3])))


def test_sensor_fault_campaign_case_tells_the_no_ramp_mutant():
    """The case the appliance's sensor-fault campaign (seed 91) found on the mutant without
    the duty ramp: the line channel offset by -484 counts during soft start. The shipped
    controller resumes with its on-time ramping in, the current answers less than the duty
    asks, and the current check latches a sensor fault within a millisecond; the mutant
    resumes at full duty, its current answers, and it cycles between line loss and soft
    start past the fault-response bound (invariant ``fault_response``)."""
    prj = load_project(EXAMPLES / "appliance_1k2.toml")
    case = ROOT / "tests" / "corpus" / "appliance_1k2"
    scn = scenario.load(case / "vac_offset_at_soft_start_needs_the_duty_ramp.toml")
    (shipped,) = fuzz.run_cases(prj, [scn])
    assert shipped.ok, shipped.failed
    mutant_built = build_project(prj, broken_loader("no_zc_ramp"))
    (mutant,) = fuzz.run_cases(prj, [scn], built=mutant_built)
    assert "fault_response" in mutant.failed, mutant.failed


def _deep_sag(vrms_V: float, low_V: float) -> scenario.Scenario:
    """Full load, the line sagging to ``low_V`` for five cycles in RUN, then back."""
    return scenario.from_dict(
        {
            "duration": 0.6,
            "grid": {"vrms": vrms_V, "freq": 50.0},
            "load": {"kind": "resistive", "power": 1500.0},
            "event": [
                {"t": 0.3, "kind": "vrms", "vrms": low_V},
                {"t": 0.4, "kind": "vrms", "vrms": vrms_V},
            ],
        }
    )


def test_mean_square_floor_mutant_is_equivalent_on_the_line_cases(
    demo_project, demo_built, no_floor
):
    """The floor (MS_FLOOR_OF_BROWNOUT x the brown-out stop, squared) lies under the brown-out
    stop, and both act on the same half's mean square in the same step: a half under the
    floor is a brown-out, whose gates are off from that period on, and a later restart
    first takes a fresh mean square above the restart level. So the floor never reaches a
    gate, and the mutant without it switches exactly as the shipped controller does, here
    on a sag under the floor, the campaign's dropout and interruption cases, and the half
    cycle dropout whose half-empty half the rms latched. Should this fail, the floor has
    begun to matter (a ride-through of low halves, say), and the fault campaign must then be
    shown to catch the mutant (README "The slow leg's midpoint")."""
    c = consts(demo_project)
    floor_V = math.sqrt(c["MS_FLOOR_V2"])
    corpus = ROOT / "tests" / "corpus"
    scns = [_deep_sag(230.0, 0.8 * floor_V), _deep_sag(115.0, 0.5 * floor_V)] + [
        scenario.load(corpus / f"{name}.toml")
        for name in (
            "half_cycle_dropout_66Hz_stale_rms_overshoot",
            "long_interruption_return_rectified_inrush",
            "half_cycle_dip_returns_reversed",
            "dip80_low_line_current_check_timing",
        )
    ]
    shipped = loop.run(demo_project, scns, progress=False, built=demo_built)
    mutant = loop.run(demo_project, scns, progress=False, built=no_floor)
    for name in ("gates", "compare", "mode", "status"):
        assert np.array_equal(shipped.data[name], mutant.data[name]), name
    # not vacuous: the sags took the sensed line's rms under the floor with the stage
    # switching before them, and the rms block took a half of it as a plausible mean square
    # (the brown-out it stopped on is decided on that mean square, where the floor acts)
    for k in (0, 1):
        lane = shipped.lane(k)
        t, v = lane["t_s"], lane["vterm_V"]
        during = (t > 0.32) & (t < 0.38)
        assert math.sqrt(float(np.mean(v[during] ** 2))) < floor_V
        assert np.any(lane["gates"][(t > 0.25) & (t < 0.3)] != 0)
        assert Mode.BROWNOUT in lane["mode"][(t > 0.3) & (t < 0.4)]
