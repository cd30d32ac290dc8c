"""The q15 build from the same templates: strict builds, Cortex-M0+ cross-compile, tracking
of the float build on identical inputs, arbitrary inputs, closed loop."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from codegen import target
from codegen.build import build_project, compile_objects
from codegen.render import render
from design.project import from_config
from harness.closedloop.loop import Controllers, run
from harness.closedloop.report import lane_report
from harness.closedloop.scenario import Scenario

from .helpers import LEGAL_GATES


@pytest.fixture(scope="module")
def q15_project(demo_project):
    return from_config(demo_project.config.replace("control", number_format="q15"))


@pytest.fixture(scope="module")
def q15_built(q15_project):
    return build_project(q15_project)


def test_q15_strict_host_build_and_deterministic(q15_project, tmp_path):
    a, b = render(q15_project), render(q15_project)
    assert a == b
    assert (
        "Number format: q15" in a["pfc_ctrl.c"] and "float" not in a["pfc_ctrl.c"].split("*/", 1)[1]
    )
    src = tmp_path / "src"
    src.mkdir()
    for n, t in a.items():
        (src / n).write_text(t)
    assert compile_objects(src, tmp_path / "obj")


@pytest.mark.skipif(
    not target.available(), reason="arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)"
)
@pytest.mark.parametrize("core", ["cortex-m0plus", "cortex-m4f"])
def test_q15_cross_compile(q15_project, core):
    rep = target.check(render(q15_project), "pfc", core)
    assert rep.undefined == [], rep.undefined  # no libm, no allocator
    assert rep.state_B <= target.STATE_LIMIT_B
    # no floating point at all in the fixed build: no soft-float helpers on the M0+
    assert not [c for c in rep.support_calls if c.endswith(("sf", "sf2", "sf3", "sfsi", "sisf"))], (
        rep.support_calls
    )


def test_q15_tracks_float_on_identical_inputs(demo_project, demo_built, q15_project, q15_built):
    """Both builds step over the ADC counts of one float closed-loop run (identical inputs):
    in steady state the current reference and the duty agree within 1 % of full scale
    (full scale: the current sensor range, and duty 1)."""
    s = Scenario(
        duration_s=0.3, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    res = run(demo_project, [s], progress=False, built=demo_built)
    d = res.lane(0)
    from harness.closedloop.loop import adc_scaling
    from plant.sensors import Sensors

    codes = Sensors(adc_scaling(demo_project), len(d["t_s"])).convert(
        d["vterm_V"], d["i_sample_A"], d["vbus_sample_V"]
    )
    outs = {}
    for name, prj, built in (("f", demo_project, demo_built), ("q", q15_project, q15_built)):
        ctl = Controllers(prj, 1, built)
        probe, mode = [], []
        for row in codes:
            o = ctl.step(row[None, :])
            probe.append(ctl.internals()[0].copy())
            mode.append(o["mode"][0])
        outs[name] = (np.array(probe), np.array(mode))
    (pf, mf), (pq, mq) = outs["f"], outs["q"]
    steady = (d["t_s"] > 0.2) & (mf == 3) & (mq == 3)
    assert steady.sum() > 5000
    fs_i = demo_project.resolved.il_range_A
    assert np.max(np.abs(pf[steady, 1] - pq[steady, 1])) <= 0.01 * fs_i  # current reference
    assert np.max(np.abs(pf[steady, 0] - pq[steady, 0])) <= 0.01  # duty


@settings(max_examples=40, deadline=None)
@given(
    seq=st.lists(
        st.tuples(st.integers(0, 65535), st.integers(0, 65535), st.integers(0, 65535)),
        min_size=1,
        max_size=40,
    ),
    repeat=st.integers(1, 60),
)
def test_q15_arbitrary_adc_stays_in_range(q15_built, seq, repeat):
    ffi, lib = q15_built.ffi, q15_built.lib
    c = ffi.new("pfc_ctrl_t*")
    adc = ffi.new("pfc_adc_t*")
    out = ffi.new("pfc_pwm_t*")
    lib.pfc_init(c)
    for k in range(len(seq) * repeat):
        adc.vac, adc.il, adc.vbus = seq[k % len(seq)]
        lib.pfc_step(c, adc, out)
        assert 0 <= out.compare <= lib.PFC_PWM_PERIOD_COUNTS
        assert out.gates in LEGAL_GATES and out.mode <= 8
        assert 0 <= c.iloop.duty <= 32768


@pytest.mark.slow
def test_q15_closed_loop_230V_full_load(q15_project, q15_built):
    s = Scenario(
        duration_s=0.5, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    rep = lane_report(run(q15_project, [s], progress=False, built=q15_built))
    assert rep["pf"] >= 0.99 and rep["thd_i"] <= 0.05 and rep["class_a_pass"]
    assert abs(rep["vbus_mean_V"] - 400.0) <= 4.0
