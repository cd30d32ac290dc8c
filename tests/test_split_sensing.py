"""Split line sensing (``[sensing] line = "split"``): L and N each measured to the bus minus on
a unipolar channel, the line their difference.  The C sense block against the arithmetic, the
design's and the scenario's refusals, the stage in closed loop (both number formats), failed L
and N channels, and the lockstep link carrying the fourth channel."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from codegen.build import build_project
from design.config import ConfigError
from design.contract import Fault, Mode, SenseFault, adc_fields
from design.project import from_config
from harness.closedloop.loop import run
from harness.closedloop.report import lane_report
from harness.closedloop.scenario import Event, Scenario

from .helpers import consts


@pytest.fixture(scope="module")
def split_project(demo_project):
    return from_config(demo_project.config.replace("sensing", line="split"))


@pytest.fixture(scope="module")
def split_built(split_project):
    return build_project(split_project)


def full_load(prj, **kw) -> Scenario:
    spec = prj.config.spec
    args = dict(
        duration_s=0.6,
        vrms_V=230.0,
        freq_Hz=50.0,
        load_kind="resistive",
        load_power_W=spec.power,
    )
    args.update(kw)
    return Scenario(**args)


def test_the_input_record_carries_l_and_n(split_project, split_built):
    ffi = split_built.ffi
    assert [n for n, _ in ffi.typeof("pfc_adc_t").fields] == ["vl", "il", "vbus", "vn"]
    assert [f.name for f in adc_fields(True)] == ["vl", "il", "vbus", "vn"]
    c = consts(split_project)
    r = split_project.resolved
    # default scale: the bus channel's range (each node swings from the bus minus to the bus
    # plus) over all the codes
    assert math.isclose(c["LN_V_PER_COUNT"], r.vbus_range_V / r.adc_full_counts, rel_tol=1e-6)
    assert "VAC_OFFSET_COUNTS" not in c


codes = st.integers(0, 4095)


@settings(max_examples=80, deadline=None)
@given(vl=codes, vn=codes)
def test_sense_takes_the_difference_and_rails_only_at_the_top(split_project, split_built, vl, vn):
    """line = (vl - vn) x scale; either node at 0 V is legal (N sits on the bus minus through
    a positive half); either at the top rail for RAIL_PERIODS samples is a line fault."""
    ffi, lib = split_built.ffi, split_built.lib
    c = consts(split_project)
    s = ffi.new("pfc_sense_t*")
    adc = ffi.new("pfc_adc_t*")
    lib.pfc_sense_init(s)
    adc.vl, adc.vn, adc.il, adc.vbus = vl, vn, 2048, 3000
    lib.pfc_sense_step(s, adc)
    want = np.float32(np.float32(vl) - np.float32(vn)) * np.float32(c["LN_V_PER_COUNT"])
    assert s.vac == pytest.approx(float(want), rel=1e-6, abs=1e-6)
    for _ in range(int(c["RAIL_PERIODS"])):
        lib.pfc_sense_step(s, adc)
    railed = max(vl, vn) >= c["RAIL_HI_COUNTS"]
    assert bool(s.fault & int(SenseFault.LINE_RAIL)) == railed


def test_a_frozen_line_needs_both_nodes_frozen(split_project, split_built):
    ffi, lib = split_built.ffi, split_built.lib
    c = consts(split_project)
    s = ffi.new("pfc_sense_t*")
    adc = ffi.new("pfc_adc_t*")
    lib.pfc_sense_init(s)
    adc.il, adc.vbus = 2048, 3000
    n = int(c["STUCK_PERIODS"]) + 2
    for k in range(n):  # L frozen, N moving: not a frozen reading
        adc.vl, adc.vn = 2500, 100 + (k % 3)
        lib.pfc_sense_step(s, adc)
    assert not s.fault & int(SenseFault.LINE_STUCK)
    for _ in range(n):  # both frozen, away from zero
        adc.vl, adc.vn = 2500, 100
        lib.pfc_sense_step(s, adc)
    assert s.fault & int(SenseFault.LINE_STUCK)


def test_design_refuses_keys_of_the_other_sensing(demo_project):
    cfg = demo_project.config
    with pytest.raises(ConfigError, match=r"vac_range.*not used with line = 'split'"):
        from_config(cfg.replace("sensing", line="split", vac_range=450.0))
    with pytest.raises(ConfigError, match=r"ln_range.*not used with line = 'bipolar'"):
        from_config(cfg.replace("sensing", ln_range=500.0))
    ov = from_config(cfg).resolved.ov_trip_V
    with pytest.raises(ConfigError, match=r"ln_range = 400 V: must exceed \[protection\] ov_trip"):
        from_config(cfg.replace("sensing", line="split", ln_range=400.0))
    assert ov > 400.0


def test_scenarios_naming_channels_the_design_lacks_are_refused(demo_project, split_project):
    four = full_load(demo_project, duration_s=0.01, noise_counts=(0.0, 0.0, 0.0, 1.0))
    with pytest.raises(ConfigError, match="one bipolar line channel"):
        run(demo_project, [four], progress=False)
    for prj, ch in ((demo_project, "vn"), (split_project, "vac")):
        ev = Event(0.005, "sensor", (), (("channel", ch), ("fault", "open")))
        s = full_load(prj, duration_s=0.01, events=(ev,))
        with pytest.raises(ConfigError, match=f"names channel '{ch}'"):
            run(prj, [s], progress=False)


@pytest.mark.parametrize("fmt", ["float32", pytest.param("q15", marks=pytest.mark.slow)])
def test_closed_loop_with_split_sensing_matches_the_bipolar_stage(demo_project, fmt):
    """The same stage with its line read as L - N: IEC 61000-3-2 Class A holds and PF and THD
    stay within a small margin of the bipolar channel's (the split channels see the same line
    with a coarser scale: the bus's range over all the codes)."""
    base = demo_project.config.replace("control", number_format=fmt)
    bip, spl = from_config(base), from_config(base.replace("sensing", line="split"))
    sens = dict(noise_counts=(0.7, 0.7, 0.7), seed=4)
    fig = {}
    for name, prj in (("bipolar", bip), ("split", spl)):
        res = run(prj, [full_load(prj, **sens)], progress=False)
        fig[name] = lane_report(res, 0)
    b, s = fig["bipolar"], fig["split"]
    assert s["steady"] and s["class_a_pass"], s.get("class_a_reason")
    assert s["pf"] >= 0.99
    assert abs(s["pf"] - b["pf"]) < 0.002
    assert abs(s["thd_i"] - b["thd_i"]) < 0.01  # 1 % point


def test_n_gain_mismatch_reads_as_a_negative_half_offset(split_project):
    """A gain error g on the N channel alone shifts the line reading by -g x vbus in the
    negative half only (N sits on the bus there, on the bus minus in the positive half): the
    stage still meets Class A at 1 % mismatch, and its current's half-wave asymmetry (DC)
    follows the mismatch's sign."""
    dc = {}
    for g in (-0.01, 0.0, 0.01):
        s = full_load(split_project, gain_error=(0.0, 0.0, 0.0, g))
        res = run(split_project, [s], progress=False)
        rep = lane_report(res, 0)
        assert rep["steady"] and rep["class_a_pass"]
        dc[g] = rep["dc_A"]
    # N read high (g > 0): v read = v - g vbus, so |v| reads high in the negative half and the
    # reference draws more current there: the DC goes negative (and positive for g < 0)
    assert dc[0.01] < dc[0.0] < dc[-0.01]


def modes_after(res, t_s):
    d = res.lane(0)
    k = int(np.searchsorted(d["t_s"], t_s))
    return d["mode"][k:], d["gates"][k:], d["faults"][k:]


@pytest.mark.parametrize(
    ("channel", "fault", "value"),
    [("vn", "open", 0.0), ("vl", "open", 0.0), ("vl", "stuck", 4095.0), ("vn", "stuck", 1800.0)],
)
def test_a_failed_l_or_n_channel_stops_the_stage(split_project, channel, fault, value):
    """L or N failing in RUN: the line reading is wrong by up to the bus in one half or both;
    the stage stops switching within three of the longest halves and stays off (a railed
    node is named as the line channel's fault)."""
    t0 = 0.45
    ev = Event(t0, "sensor", (("value_counts", value),), (("channel", channel), ("fault", fault)))
    s = full_load(split_project, events=(ev,), duration_s=0.7)
    res = run(split_project, [s], progress=False)
    fmin = split_project.config.protection.freq_min
    bound_s = 3.0 / (2.0 * fmin)
    modes, gates, faults = modes_after(res, t0 + bound_s)
    assert not gates.any(), f"gates on {int(np.count_nonzero(gates))} periods after the bound"
    assert not (modes == Mode.RUN).any()
    d = res.lane(0)
    peak = float(np.maximum(np.abs(d["i_max_A"]), np.abs(d["i_min_A"])).max())
    assert peak < split_project.resolved.device_current_A
    if value >= 4095:
        assert faults[-1] & int(Fault.SENSOR_VAC)


@pytest.mark.slow
def test_the_link_carries_four_channels_and_the_target_equals_the_in_process_run(split_project):
    """Processor in the loop on the host target: a STEP request carries 8 bytes a period
    (vl, il, vbus, vn) and every output equals the in-process run."""
    from harness.targets.pil import compare_outputs, run_pil

    s = full_load(split_project, duration_s=0.08, noise_counts=(0.7, 0.7, 0.7, 0.7), seed=9)
    pil = run_pil(split_project, s, "host")
    ref = run(split_project, [s], progress=False)
    cmp_ = compare_outputs(ref, pil.result)
    assert cmp_.periods >= 5000 and cmp_.equal, cmp_.first_difference
    assert cmp_.final_state_equal is True
