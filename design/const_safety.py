"""Constants of the plausibility block and the slow-leg and synchronous-switch guards: what
turns a failed sensor or a glitch into a safe state (rows of ``design.constants``)."""

from __future__ import annotations

import math

from .project import Project
from .rules import (
    BAD_HALVES_MAX,
    BAL_FLOOR_OF_PCMD_MAX,
    BAL_MARGIN,
    BAL_NOISE_COUNTS,
    BAL_WINDOW_S,
    BUS_LOW_PERIODS,
    BUS_PLAUS_OF_PEAK,
    IL_IDLE_FALL_OF_SLOPE,
    IL_IDLE_OF_PEAK,
    IL_IDLE_PERIODS,
    IL_PLAUS_ERR_OF_PEAK,
    IL_PLAUS_PERIODS,
    IL_STILL_COUNTS,
    IL_TRACK_ERR_OF_PEAK,
    IL_ZERO_MIN_PERIODS,
    IL_ZERO_OF_PEAK,
    LINE_OFFSET_CYCLES,
    LINE_OFFSET_OF_VPK_MIN,
    PCMD_MAX_OF_RATED,
    PG_OFF_OF_VOUT,
    PG_ON_OF_VOUT,
    PRECHARGE_OF_PEAK,
    RELAY_CLOSE_OF_PEAK,
    RELAY_FLAT_OF_VOUT,
    RELAY_FLOOR_MARGIN,
    RELAY_HOLD_HALVES,
    RELAY_OPEN_OF_PEAK,
    RELAY_RISE_OF_VOUT,
    RELAY_WAIT_OF_DELAY,
    RMS_AGE_OF_HALF_MAX,
    SLOW_OFF_MIN_PERIODS,
    SLOW_SWAP_OF_PEAK,
    SYNC_MIN_OF_PEAK,
    Add,
)
from .rules import HALF_MAX_FREQ_MARGIN as HALF_MAX_MARGIN


def plausibility(add: Add, prj: Project) -> None:
    s, r = prj.config.spec, prj.resolved
    vb, ib, ipk = r.vbus_range_V, r.il_range_A, prj.sizing.iline_peak_A
    pb = vb * ib
    vpk_max = math.sqrt(2.0) * s.vin_rms_max
    vpk_min = math.sqrt(2.0) * s.vin_rms_min
    margin = (1.0 - PRECHARGE_OF_PEAK) * vpk_max
    add(
        "BUS_LOW_MARGIN_V",
        margin,
        "f",
        "V",
        "while switching, a bus reading below |v_line| by more than this is a failed bus "
        "channel (a boost's bus cannot sit below its line but for the diodes' inrush)",
        f"rule: (1 - {PRECHARGE_OF_PEAK:g} precharge fraction) x highest line peak",
        (vb, 15),
    )
    add(
        "BUS_PLAUS_K",
        2.0 * BUS_PLAUS_OF_PEAK**2,
        "f",
        "1",
        f"while switching, vbus^2 < K x ms ({100 * BUS_PLAUS_OF_PEAK:g} % of the line peak) is a "
        "bus reading no real bus shows: switching starts only with the bus at "
        f"{100 * PRECHARGE_OF_PEAK:g} % of the peak, and the boost holds it above the peak",
        f"rule: {BUS_PLAUS_OF_PEAK:g} x line peak",
        (1.0, 15),
    )
    add(
        "BUS_LOW_PERIODS",
        BUS_LOW_PERIODS,
        "u",
        "periods",
        "consecutive such periods before the bus channel counts as failed",
        f"rule: {BUS_LOW_PERIODS}",
    )
    pl = prj.config.plant
    # the duty drives, over the several periods the check watches, the boost inductor with
    # the grid's (and below the filter's resonance the DM) inductance in series
    l_series = r.inductance_H + pl.source_inductance
    l_series += pl.dm_inductance if r.x_capacitance_F > 0.0 else 0.0
    add(
        "IL_SLOPE_A_PER_V",
        1.0 / (s.fsw * l_series),
        "f",
        "A/V",
        "current rise per period per volt the duty puts across the inductors (T/L): the boost "
        "inductor with the grid's (and an input filter's DM) inductance in series",
        f"1/(fsw x L), L = {l_series:.6g} H (boost {r.inductance_H:.6g} H)",
        (ib / vb, 15),
    )
    add(
        "IL_WINDOW_PERIODS",
        IL_PLAUS_PERIODS,
        "u",
        "periods",
        "longest run of periods over which the current's change is set against the change the "
        "duty drives",
        f"rule: {IL_PLAUS_PERIODS}",
    )
    add(
        "IL_PLAUS_ERR_A",
        IL_PLAUS_ERR_OF_PEAK * ipk,
        "f",
        "A",
        "expected change beyond the measured one by more than this over a run: the current "
        "channel failed",
        f"rule: {IL_PLAUS_ERR_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )
    add(
        "IL_STILL_A",
        IL_STILL_COUNTS * r.il_A_per_count,
        "f",
        "A",
        "a period's measured change under this (a frozen code) or under half the expected one "
        "continues the run",
        f"rule: {IL_STILL_COUNTS} codes of the current channel",
        (ib, 15),
    )
    add(
        "IL_TRACK_ERR_A",
        IL_TRACK_ERR_OF_PEAK * ipk,
        "f",
        "A",
        "... and the current off its reference by more than this or half the reference, "
        "whichever is less (a current at its reference is one the loop tracks)",
        f"rule: {IL_TRACK_ERR_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )
    add(
        "IL_ZERO_MAX_A",
        IL_ZERO_OF_PEAK * ipk,
        "f",
        "A",
        "three quarters of a stretch at rest (gates off, line in the blanking band, where no "
        "current flows) beyond this on one side: an offset",
        f"rule: {IL_ZERO_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )
    slope = 1.0 / (s.fsw * r.inductance_H)
    add(
        "IL_IDLE_A",
        IL_IDLE_OF_PEAK * ipk,
        "f",
        "A",
        "with the gates off and the line read below the bus by BUS_LOW_MARGIN_V no current "
        "flows once the inductor has emptied: a current beyond this then is a line the line "
        "channel misses (or a flow the current channel invents)",
        f"rule: {IL_IDLE_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )
    add(
        "IL_IDLE_FALL_A",
        IL_IDLE_FALL_OF_SLOPE * margin * slope,
        "f",
        "A",
        "... the least a current the diodes carry falls in a period with the line that far "
        "below the bus (L di/dt = -margin), halved for the reading's noise",
        f"rule: {IL_IDLE_FALL_OF_SLOPE:g} x BUS_LOW_MARGIN_V x T/L",
        (ib, 15),
    )
    add(
        "IL_IDLE_PERIODS",
        IL_IDLE_PERIODS,
        "u",
        "periods",
        "consecutive periods such a current holds or rises: the line channel failed",
        f"rule: {IL_IDLE_PERIODS}",
    )
    add(
        "IL_ZERO_MIN_PERIODS",
        IL_ZERO_MIN_PERIODS,
        "u",
        "periods",
        "shortest at-rest stretch whose mean counts",
        f"rule: {IL_ZERO_MIN_PERIODS}",
    )
    bal_n = max(1, math.ceil(BAL_WINDOW_S * s.fsw))
    p_max = PCMD_MAX_OF_RATED * s.power / s.efficiency
    noise = BAL_NOISE_COUNTS * r.vbus_V_per_count
    add(
        "BAL_PERIODS",
        bal_n,
        "u",
        "periods",
        "window of the energy check: switching periods with the line below the bus",
        f"rule: ceil({BAL_WINDOW_S * 1e3:g} ms x fsw)",
    )
    add(
        "BAL_V2_PER_W",
        2.0 * BAL_MARGIN * bal_n / (s.fsw * r.capacitance_F),
        "f",
        "V^2/W",
        "largest rise of vbus^2 over such a window per watt of the window's largest power "
        "the current reference draws, iref x |v_line|: the bus energy C v^2/2 cannot rise "
        "faster than the stage draws from the line; a faster rise is a current the channel "
        "does not show (the loop closes around a reading that is too low and drives the real "
        "current up)",
        f"rule: 2 x {BAL_MARGIN:g} x BAL_PERIODS/(fsw C), C = {r.capacitance_F:.4g} F",
        (16.0 * vb * vb / pb, 15),
    )
    add(
        "BAL_V2_PER_A2",
        r.inductance_H / r.capacitance_F,
        "f",
        "V^2/A^2",
        "added to that bound per ampere squared of the current at the window's start: the "
        "inductor's energy L i^2/2 may go into the bus as well",
        "L/C",
        (16.0 * vb * vb / (ib * ib), 15),
    )
    add(
        "BAL_P_FLOOR_W",
        BAL_FLOOR_OF_PCMD_MAX * p_max,
        "f",
        "W",
        "the power the energy check takes at least (light load and the crossings: the bus "
        "reading's noise)",
        f"rule: {BAL_FLOOR_OF_PCMD_MAX:g} x PCMD_MAX_W",
        (pb, 15),
    )
    add(
        "BAL_NOISE_V2",
        2.0 * s.vout * noise,
        "f",
        "V^2",
        "added to the energy check's bound: the bus reading's noise",
        f"rule: 2 vout x {BAL_NOISE_COUNTS} codes",
        (vb * vb, 30),
    )
    add(
        "LINE_OFFSET_MAX_V",
        LINE_OFFSET_OF_VPK_MIN * vpk_min,
        "f",
        "V",
        "line channel's mean over a whole line cycle beyond this: an offset (or DC on the line) "
        "that would misplace the zero crossings",
        f"rule: {LINE_OFFSET_OF_VPK_MIN:g} x lowest line peak",
        (vb, 15),
    )
    add(
        "LINE_OFFSET_CYCLES",
        LINE_OFFSET_CYCLES,
        "u",
        "cycles",
        "consecutive cycles beyond it before the line channel counts as failed",
        f"rule: {LINE_OFFSET_CYCLES}",
    )


def guards(add: Add, prj: Project) -> None:
    s, pr, r = prj.config.spec, prj.config.protection, prj.resolved
    ib, ipk = r.il_range_A, prj.sizing.iline_peak_A
    half_max = math.ceil(s.fsw / (2.0 * HALF_MAX_MARGIN * pr.freq_min))
    add(
        "BAD_HALVES_MAX",
        BAD_HALVES_MAX,
        "u",
        "halves",
        "consecutive implausible half cycles (too short or too long) that stop switching",
        f"rule: {BAD_HALVES_MAX}",
    )
    add(
        "RMS_AGE_MAX_PERIODS",
        math.ceil(RMS_AGE_OF_HALF_MAX * half_max),
        "u",
        "periods",
        "an rms value not refreshed over this many switching periods stops switching",
        f"rule: {RMS_AGE_OF_HALF_MAX:g} x HALF_MAX_PERIODS",
    )
    add(
        "SLOW_OFF_MIN_PERIODS",
        SLOW_OFF_MIN_PERIODS,
        "u",
        "periods",
        "slow leg off at least this long before its other switch turns on",
        f"rule: {SLOW_OFF_MIN_PERIODS}",
    )
    add(
        "SLOW_SWAP_MAX_A",
        SLOW_SWAP_OF_PEAK * ipk,
        "f",
        "A",
        "|i| below this before the slow leg changes switch (no reverse recovery of the one "
        "carrying current)",
        f"rule: {SLOW_SWAP_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )
    diode = prj.config.plant.slow_leg == "diode"
    # a slow leg of diodes carries no reverse current: the synchronous switch only while the
    # current's valley stays forward (half the worst-case ripple below the sampled mean)
    hold = 0.5 * prj.sizing.ripple_worst_A if diode else -SYNC_MIN_OF_PEAK * ipk
    add(
        "SYNC_MIN_A",
        SYNC_MIN_OF_PEAK * ipk + max(hold, 0.0),
        "f",
        "A",
        "synchronous switch turned on only with the current at least this far in the half's "
        "direction (no reverse current through it)",
        f"rule: {SYNC_MIN_OF_PEAK:g} x sized peak line current"
        + (" + SYNC_HOLD_A (a diode slow leg)" if diode else ""),
        (ib, 15),
    )
    add(
        "SYNC_HOLD_A",
        hold,
        "f",
        "A",
        "the synchronous switch, once on, is kept on while the current is this far in the "
        "half's direction (below SYNC_MIN_A: hysteresis, no light-load limit cycle); with a "
        "diode slow leg half the worst-case ripple forward, so that the valley never reverses "
        "(the slow diode would block it and its midpoint swing)",
        "half the worst-case ripple (diode slow leg)"
        if diode
        else f"rule: -{SYNC_MIN_OF_PEAK:g} x sized peak line current",
        (ib, 15),
    )


def relay(add: Add, prj: Project) -> None:
    s, r, pl = prj.config.spec, prj.resolved, prj.config.plant
    vb = r.vbus_range_V
    add(
        "RELAY_RISE_V",
        RELAY_RISE_OF_VOUT * s.vout,
        "f",
        "V",
        "precharge done once the bus moves (up or down) less than this from one crossing to "
        "the next (with the bus at the precharge level): then the relay closes",
        f"rule: {RELAY_RISE_OF_VOUT:g} x vout",
        (vb, 15),
    )
    add(
        "RELAY_CLOSE_K",
        2.0 * RELAY_CLOSE_OF_PEAK**2,
        "f",
        "1",
        "the relay closes only with vbus^2 >= K x ms "
        f"({100 * RELAY_CLOSE_OF_PEAK:g} % of the line peak) as well: the step left across the "
        "inductors when the contacts short the limiter drives a resonant inrush of about "
        "step x sqrt(C/L), so the limiter must first have charged the bus close to the peak "
        "(a large bus capacitor settles, by RELAY_RISE_V, further below it)",
        f"rule: {RELAY_CLOSE_OF_PEAK:g} x line peak",
        (1.0, 15),
    )
    add(
        "RELAY_FLAT_V",
        RELAY_FLAT_OF_VOUT * s.vout,
        "f",
        "V",
        "the bus counts as held (not still charging through the limiter) when it moves less "
        "than this from one crossing to the next: a large capacitor creeps toward the peak by "
        "more than this while the limiter still charges it",
        f"rule: {RELAY_FLAT_OF_VOUT:g} x vout",
        (vb, 15),
    )
    add(
        "RELAY_HOLD_HALVES",
        RELAY_HOLD_HALVES,
        "u",
        "crossings",
        "or the relay closes once the bus has been flat (RELAY_FLAT_V) at the precharge "
        "level (below RELAY_CLOSE_K) this many crossings in a row: a load left on the bus "
        "holds it there through the limiter, waiting longer cannot lift it, and the stage "
        "must start; the step left then drives an inrush of up to "
        "(1 - PRECHARGE_OF_PEAK) x peak x sqrt(C/L)",
        f"rule: {RELAY_HOLD_HALVES} crossings",
    )
    add(
        "RELAY_WAIT_PERIODS",
        math.ceil(RELAY_WAIT_OF_DELAY * pl.relay_delay * s.fsw),
        "u",
        "periods",
        "after the close command, no switching for this long (the contacts settle)",
        f"rule: {RELAY_WAIT_OF_DELAY:g} x [plant] relay_delay x fsw",
    )
    add(
        "RELAY_OPEN_K",
        2.0 * RELAY_OPEN_OF_PEAK**2,
        "f",
        "1",
        "with the gates off and the line still gone, the relay opens when vbus^2 < K x ms "
        f"({100 * RELAY_OPEN_OF_PEAK:g} % of the line peak): the line's return would drive an "
        "inrush the limiter must take",
        f"rule: {RELAY_OPEN_OF_PEAK:g} x line peak",
        (1.0, 15),
    )
    floor = min(math.sqrt(2.0) * s.vin_rms_max, RELAY_FLOOR_MARGIN * s.vout_min_holdup)
    add(
        "RELAY_OPEN_V",
        floor,
        "f",
        "V",
        "with the gates off and the line lost or low, the relay also opens when the bus falls "
        "below this: the downstream converter stops at [spec] vout_min_holdup and leaves the bus "
        "there, under a line that may return at up to the highest rated peak (a return through "
        "the closed relay would drive the rectified inrush through the diodes); above it the "
        "relay stays closed, so a dropout the hold-up rides through needs no re-close",
        f"rule: min(highest line peak, {RELAY_FLOOR_MARGIN:g} x vout_min_holdup; the margin "
        "covers the bus reading's gain error)",
        (vb, 15),
    )
    add(
        "PG_ON_V",
        PG_ON_OF_VOUT * s.vout,
        "f",
        "V",
        "power good set in RUN with the bus above this",
        f"rule: {PG_ON_OF_VOUT:g} x vout",
        (vb, 15),
    )
    add(
        "PG_OFF_V",
        PG_OFF_OF_VOUT * s.vout,
        "f",
        "V",
        "power good cleared below this, or when the stage trips, latches or faults",
        f"rule: {PG_OFF_OF_VOUT:g} x vout",
        (vb, 15),
    )
