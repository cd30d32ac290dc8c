"""Each sensor-fault and glitch hazard as a scenario in closed loop, checked against the
single-fault invariants (``harness.campaigns.safety``) and the hazard's own consequence.

The counts of each fault come from the demo config's ADC scaling, so the scenarios say in
volts and amperes what the front end reads.  All hazards run as lanes of one batch."""

from __future__ import annotations

import math

import numpy as np
import pytest

from design.contract import Fault, Gate, Mode
from design.project import load_project
from harness.campaigns import safety
from harness.campaigns.invariants import Lane, timing_of
from harness.closedloop import scenario as S
from harness.closedloop.loop import run

from .helpers import DEMO, consts

PRJ = load_project(DEMO)
R = PRJ.resolved
SPEC = PRJ.config.spec


def counts_vac(v_V: float) -> float:
    return round(R.vac_offset_counts + v_V / R.vac_V_per_count)


def scn(name, duration, vrms=230.0, freq=50.0, power=SPEC.power, kind="resistive", events=()):
    return S.from_dict(
        {
            "name": name,
            "duration": duration,
            "grid": {"vrms": vrms, "freq": freq},
            "load": {"kind": kind, "power": power},
            "event": list(events),
        }
    )


def sensor(t, channel, fault, **kw):
    return {"t": t, "kind": "sensor", "channel": channel, "fault": fault, **kw}


HAZARDS = {
    # 1: the bus channel fails low in RUN at 300 W: both OV and OC protection must stay
    "bus_reads_zero": scn(
        "bus_reads_zero", 0.6, power=300.0, events=[sensor(0.4, "vbus", "stuck", value_counts=0)]
    ),
    # 2: the current channel stuck at its zero code at full load
    "current_reads_zero": scn(
        "current_reads_zero",
        0.5,
        events=[sensor(0.3, "il", "stuck", value_counts=R.il_offset_counts)],
    ),
    # 3: two line samples of -11 V at the positive peak, high line, full load
    "line_glitch_at_peak": scn(
        "line_glitch_at_peak",
        0.45,
        vrms=264.0,
        events=[sensor(0.305, "vac", "glitch", value_counts=counts_vac(-11.0), periods=2)],
    ),
    # 4: an interruption long enough to drain the bus under a constant-power load, then the
    # line returns: no resume into an unprecharged bus
    "resume_after_dropout": scn(
        "resume_after_dropout",
        0.8,
        kind="constant_power",
        events=[{"t": 0.3, "kind": "dip", "residual": 0.0, "cycles": 10.0}],
    ),
    # 5: the line turns into 50 V at 100 Hz (every half implausibly short)
    "line_too_fast": scn(
        "line_too_fast",
        0.7,
        events=[{"t": 0.3, "kind": "vrms", "vrms": 50.0}, {"t": 0.3, "kind": "freq", "hz": 100.0}],
    ),
    # 6: a 40 V offset on the line channel, from power-up and arising in RUN
    "line_offset_at_start": scn(
        "line_offset_at_start",
        0.3,
        events=[sensor(0.0, "vac", "offset", value_counts=round(40.0 / R.vac_V_per_count))],
    ),
    "line_offset_in_run": scn(
        "line_offset_in_run",
        0.5,
        events=[sensor(0.3, "vac", "offset", value_counts=round(40.0 / R.vac_V_per_count))],
    ),
    # 7: a nominal run, for the compare/gate and synchronous-switch rules
    "nominal": scn("nominal", 0.35),
    # 8: a railed current glitch every 0.7 s (slower than any fixed clearing time)
    "recurring_trip": scn(
        "recurring_trip",
        2.4,
        events=[
            sensor(t, "il", "glitch", value_counts=R.adc_full_counts, periods=1)
            for t in (0.2, 0.9, 1.6, 2.3)
        ],
    ),
}


@pytest.fixture(scope="module")
def lanes():
    names = list(HAZARDS)
    res = run(PRJ, [HAZARDS[k] for k in names], progress=False)
    out = {}
    for j, name in enumerate(names):
        s = HAZARDS[name]
        n = int(round(s.duration_s * SPEC.fsw))
        d = {key: a[:n] for key, a in res.lane(j).items()}
        out[name] = Lane(PRJ, s, d, timing_of(PRJ, s))
    return out


def held(ln: Lane) -> dict[str, str]:
    return {k: m for k, f in safety.SAFETY_INVARIANTS.items() if (m := f(ln)) is not None}


@pytest.mark.parametrize("name", list(HAZARDS))
def test_single_fault_invariants_hold(lanes, name):
    assert held(lanes[name]) == {}


def _after(ln: Lane, t_s: float) -> slice:
    return slice(int(np.searchsorted(ln.d["t_s"], t_s)), None)


def test_bus_channel_failing_low_stops_the_stage_naming_the_bus(lanes):
    ln = lanes["bus_reads_zero"]
    a = _after(ln, 0.4)
    assert ln.modes[a][-1] == Mode.SENSOR_FAULT
    assert int(ln.d["faults"][-1]) & Fault.SENSOR_VBUS
    assert ln.d["vbus_V"][a].max() < R.ov_trip_V  # not even the firmware's own trip reached
    off = np.flatnonzero(ln.gates[a] == 0)[0]
    assert off < SPEC.fsw / (4 * 50.0) + 20  # within a quarter line cycle and the count


def test_current_channel_stuck_at_zero_stops_before_the_device_limit(lanes):
    ln = lanes["current_reads_zero"]
    a = _after(ln, 0.3)
    assert ln.modes[a][-1] == Mode.SENSOR_FAULT and int(ln.d["faults"][-1]) & Fault.SENSOR_IL
    peak = np.maximum(np.abs(ln.d["i_max_A"][a]), np.abs(ln.d["i_min_A"][a])).max()
    assert peak < R.device_current_A
    # and no restart after: the latch holds
    last_on = np.flatnonzero(ln.gates[a] != 0)
    assert len(last_on) and ln.d["t_s"][a][last_on[-1]] < 0.3 + 0.01


def test_line_glitch_does_not_swap_the_slow_leg(lanes):
    ln = lanes["line_glitch_at_peak"]
    assert safety.unsafe_swaps(ln.d, PRJ) == 0
    assert not np.any(ln.d["shoot_through"])
    a = _after(ln, 0.3)
    peak = np.maximum(np.abs(ln.d["i_max_A"][a]), np.abs(ln.d["i_min_A"][a])).max()
    assert peak < R.oc_trip_A  # the glitch is ridden through
    assert ln.modes[-1] == Mode.RUN


def test_no_resume_into_an_unprecharged_bus(lanes):
    ln = lanes["resume_after_dropout"]
    assert safety.restart(ln) is None
    back = 0.3 + 10.0 / 50.0
    a = _after(ln, back)
    starts = np.flatnonzero((ln.gates[a][1:] != 0) & (ln.gates[a][:-1] == 0)) + 1
    assert len(starts)  # it does resume
    k = a.start + starts[0]
    vpk = math.sqrt(2.0) * 230.0
    c = consts(PRJ)
    assert ln.d["vbus_V"][k] >= math.sqrt(c["PRECHARGE_K"] / 2.0) * vpk * 0.98


def test_a_line_of_implausible_halves_stops_switching(lanes):
    ln = lanes["line_too_fast"]
    a = _after(ln, 0.3)
    # within three half cycles of the new line no more switching, and no RUN after
    k = int(3 * SPEC.fsw / (2 * 100.0))
    assert not np.any(ln.gates[a][k:] != 0)
    assert not np.any(ln.modes[a][k:] == Mode.RUN)


def test_line_offset_is_refused_before_start_and_in_run(lanes):
    ln = lanes["line_offset_at_start"]
    assert not np.any(ln.gates != 0)
    assert ln.modes[-1] == Mode.SENSOR_FAULT and int(ln.d["faults"][-1]) & Fault.SENSOR_VAC
    ln = lanes["line_offset_in_run"]
    a = _after(ln, 0.3)
    cycles = int(consts(PRJ)["LINE_OFFSET_CYCLES"]) + 2
    k = int(cycles * SPEC.fsw / 50.0)
    assert not np.any(ln.gates[a][k:] != 0)
    # named: the line channel, or the current that disagreed with the duty first (the firmware
    # cannot tell which of two disagreeing channels is wrong; the README states it)
    assert int(ln.d["faults"][-1]) & (Fault.SENSOR_VAC | Fault.SENSOR_IL)


def test_compare_and_gates_change_together_and_sync_turns_on_only_forward(lanes):
    ln = lanes["nominal"]
    per, g, cmp_ = R.pwm_period_counts, ln.gates, ln.d["compare"].astype(int)
    on = np.flatnonzero((g[1:] != 0) & (g[:-1] == 0)) + 1
    assert len(on) > 20
    for k in on:
        main_hi = bool(g[k] & Gate.SLOW_HI)  # negative half: the fast high switch is main
        # the compare before the enable gave that main switch no on-time
        assert cmp_[k - 1] == (per if main_hi else 0), (k, cmp_[k - 1], g[k])
    c = consts(PRJ)
    pos_sync = (g & Gate.SLOW_LO).astype(bool) & (g & Gate.FAST_HI).astype(bool)
    neg_sync = (g & Gate.SLOW_HI).astype(bool) & (g & Gate.FAST_LO).astype(bool)
    i_prev = np.concatenate([[0.0], ln.d["i_sample_A"][:-1]])  # the sample the step saw
    quant = R.il_A_per_count
    sync = pos_sync | neg_sync
    fwd = np.where(pos_sync, i_prev, -i_prev)  # in the half's direction
    was = np.concatenate([[False], sync[:-1]])
    # turned on only with the current forward by SYNC_MIN_A; kept on while it has not
    # reversed past -SYNC_MIN_A (the hysteresis of pwm.h)
    turn_on, held = sync & ~was, sync & was
    assert turn_on.sum() > 20 and held.sum() > 20
    assert np.all(fwd[turn_on] > c["SYNC_MIN_A"] - quant)
    assert np.all(fwd[held] > -c["SYNC_MIN_A"] - quant)


def test_a_slowly_recurring_trip_latches(lanes):
    ln = lanes["recurring_trip"]
    m = ln.modes
    trips = int(np.sum((m[1:] == Mode.TRIPPED) & (m[:-1] != Mode.TRIPPED)))
    assert trips == PRJ.config.protection.retry_limit - 1
    assert m[-1] == Mode.LATCHED


def _ctrl(built):
    ffi, lib = built.ffi, built.lib
    c, adc, out = ffi.new("pfc_ctrl_t*"), ffi.new("pfc_adc_t*"), ffi.new("pfc_pwm_t*")
    lib.pfc_init(c)
    return ffi, lib, c, adc, out


def test_fault_clear_request_leaves_a_latch_only_on_request(demo_built):
    """A latch is left by pfc_clear_faults only (back to waiting for the line, history kept),
    never by time."""
    ffi, lib, c, adc, out = _ctrl(demo_built)
    c.sup.mode = lib.PFC_MODE_LATCHED
    c.sup.trips = 3
    adc.vac, adc.il, adc.vbus = int(R.vac_offset_counts), int(R.il_offset_counts), 0
    for _ in range(int(2 * SPEC.fsw)):
        lib.pfc_step(c, adc, out)
        if out.mode != lib.PFC_MODE_LATCHED:
            break
    assert out.mode == lib.PFC_MODE_LATCHED
    lib.pfc_clear_faults(c)
    lib.pfc_step(c, adc, out)
    assert out.mode == lib.PFC_MODE_WAIT_LINE and c.sup.trips == 0
    # in any other mode a clear request does nothing
    lib.pfc_clear_faults(c)
    assert c.sup.mode == lib.PFC_MODE_WAIT_LINE


def test_no_start_with_the_bus_above_the_ov_trip(demo_project, demo_built):
    """Waiting for the line with a good line and a bus above the over-voltage trip: no start."""
    c = consts(demo_project)
    ffi, lib = demo_built.ffi, demo_built.lib
    sv, sn, pf = ffi.new("pfc_supervisor_t*"), ffi.new("pfc_sense_t*"), ffi.new("pfc_plaus_t*")
    pl, rm = ffi.new("pfc_polarity_t*"), ffi.new("pfc_rms_t*")
    for init, x in (
        (lib.pfc_supervisor_init, sv),
        (lib.pfc_plaus_init, pf),
        (lib.pfc_polarity_init, pl),
        (lib.pfc_rms_init, rm),
    ):
        init(x)
    pl.freq_ok, rm.valid, rm.brown, rm.ms = 1, 5, 0, 230.0**2
    pf.off_good = 1  # the line channel's offset measured within its limit
    sv.relay, sv.relay_timer = 1, 1 << 30  # the inrush relay closed long ago
    sn.vbus = 1.02 * c["OV_TRIP_V"]
    for _ in range(100):
        lib.pfc_supervisor_step(sv, sn, pf, pl, rm, 0)
    assert sv.mode == lib.PFC_MODE_WAIT_LINE
    sn.vbus = 0.99 * c["VOUT_V"]
    lib.pfc_supervisor_step(sv, sn, pf, pl, rm, 0)
    assert sv.mode == lib.PFC_MODE_PRECHARGED


def test_sensor_fault_campaign_on_the_demo(demo_project):
    """A bounded campaign: every case fails one sensor at any phase and mode (hypothesis)."""
    from harness.campaigns import fuzz

    res = fuzz.campaign(demo_project, 32, seed=7, log=lambda m: None, sensor_faults=True)
    assert res.names == list(safety.SAFETY_INVARIANTS)
    bad = [(v.failed, v.case) for v in res.verdicts if not v.ok]
    assert bad == []


@pytest.mark.slow
@pytest.mark.parametrize("example", ["telecom_3k3", "appliance_1k2"])
def test_sensor_fault_campaign_on_the_shipped_examples(example):
    from harness.campaigns import fuzz

    from .helpers import EXAMPLES

    prj = load_project(EXAMPLES / f"{example}.toml")
    res = fuzz.campaign(prj, 64, seed=2026, log=lambda m: None, sensor_faults=True, workers=2)
    bad = [(v.failed, v.case) for v in res.verdicts if not v.ok]
    assert bad == []
