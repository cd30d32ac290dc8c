"""Constants of the control: the voltage loop, the current reference and loop, the PWM, the
supervisor and protection (rows of ``design.constants``)."""

from __future__ import annotations

import math

from .derive import ff_step, filter_resonance_Hz, ramp_charge_W
from .project import Project
from .rules import (
    DIODE_MARGIN_OF_VOUT,
    FF_STEP_OF_VPK_MIN,
    GUARD_RAMP_RESONANCES,
    IREF_MAX_OF_OC,
    IREF_MAX_OF_PEAK,
    LINE_LOSS_RESET_S,
    PCMD_MAX_OF_RATED,
    PRECHARGE_OF_PEAK,
    RAMP_HOLD_OF_VOUT,
    SOFT_START_CHARGE_OF_RATED,
    SOFT_START_MIN_S,
    TRIP_DECAY_S,
    VBUS_GUARD_OF_SPAN,
    Add,
    u32,
)
from .tuning import BUS_BLOCKS


def vloop(add: Add, prj: Project) -> None:
    s, c, r, v = prj.config.spec, prj.config.control, prj.resolved, prj.tuning.voltage
    fsw, vb, pb = s.fsw, r.vbus_range_V, r.vbus_range_V * r.il_range_A
    shift = BUS_BLOCKS.bit_length() - 1
    t_ss = r.soft_start_s
    step = s.vout / (t_ss * fsw)
    ss_rule = (
        "[control] soft_start_time"
        if c.soft_start_time is not None
        else f"rule: charging power C vout^2/time <= {SOFT_START_CHARGE_OF_RATED:g} x "
        f"[spec] power, time >= {SOFT_START_MIN_S:g} s"
    )
    add(
        "BUS_BLOCKS",
        BUS_BLOCKS,
        "u",
        "blocks",
        "blocks in the sliding half-cycle bus average",
        "design: power of two",
    )
    add(
        "BUS_BLOCK_SHIFT",
        shift,
        "u",
        "bits",
        "block length = half period >> shift",
        "log2(BUS_BLOCKS)",
    )
    add(
        "BUS_BLOCK_NOMINAL",
        max(1, round(fsw / (2.0 * s.line_freq)) >> shift),
        "u",
        "periods",
        "block length before the first measured half",
        "fsw/(2 line_freq)/BUS_BLOCKS",
    )
    add("VOUT_V", s.vout, "f", "V", "bus reference", "[spec] vout", (vb, 31))
    add(
        "VREF_STEP_V",
        step,
        "f",
        "V/period",
        "soft-start reference slope",
        f"vout/(soft start time x fsw), time = {t_ss:.4g} s from {ss_rule}; the capacitor "
        f"then charges at {ramp_charge_W(r.capacitance_F, s.vout, t_ss):.0f} W at most",
        (vb, 31),
    )
    add(
        "RAMP_FF_W_PER_V",
        r.capacitance_F * (s.vout / t_ss) / s.efficiency,
        "f",
        "W/V",
        "ramp feedforward: capacitor charging power per volt of reference",
        f"C x vout/soft start time / efficiency, C = {r.capacitance_F:.6g} F",
        (pb / vb, 15),
    )
    add(
        "RAMP_LAG_V",
        step * fsw / (2.0 * s.line_freq) / 2.0,
        "f",
        "V",
        "lag of the half-cycle bus mean behind the ramp",
        "VREF_STEP_V x half a half-period of samples",
        (vb, 15),
    )
    add(
        "RAMP_HOLD_V",
        step * fsw / (2.0 * s.line_freq) / 2.0 + RAMP_HOLD_OF_VOUT * s.vout,
        "f",
        "V",
        "the soft-start ramp waits while the bus mean lags it by more than this",
        f"RAMP_LAG_V + {RAMP_HOLD_OF_VOUT:g} x vout",
        (vb, 15),
    )
    add(
        "VKP",
        v.kp,
        "f",
        "W/V",
        "voltage PI proportional gain",
        f"tuning: {v.target_crossover_Hz:g} Hz, {v.target_phase_margin_deg:g} deg",
        (pb / vb, 15),
    )
    add(
        "VKI_TS",
        v.ki_ts,
        "f",
        "W/V",
        "voltage PI integral gain x block period (backward Euler)",
        f"tuning: Ki = {v.ki:.6g} W/(V s), T = {v.ts_s:.6g} s",
        (pb / vb, 31),
    )
    add(
        "VHELD_BLEED",
        1.0 / (fsw * (v.kp / v.ki)),
        "f",
        "1/period",
        "while the bus guard holds the current reference at zero, the share of the command's "
        "excess over what is delivered (zero) taken off the integrator each period: "
        "back-calculation anti-windup with its tracking time equal to the integral time kp/ki",
        f"rule: 1/(fsw x Ti), Ti = kp/ki = {1e3 * v.kp / v.ki:.4g} ms",
        (1.0, 31),
    )
    add(
        "PCMD_MAX_W",
        PCMD_MAX_OF_RATED * s.power / s.efficiency,
        "f",
        "W",
        "largest input power command",
        f"{PCMD_MAX_OF_RATED:g} x [spec] power/efficiency",
        (pb, 15),
    )


def iloop(add: Add, prj: Project) -> None:
    s, r, i = prj.config.spec, prj.resolved, prj.tuning.current
    vb, ib = r.vbus_range_V, r.il_range_A
    xc_on = prj.config.control.x_cap_compensation == "on"
    add(
        "XC_ON",
        1 if xc_on else 0,
        "u",
        "",
        "1: the current reference is lowered by the X capacitor's current (block xcomp)",
        "[control] x_cap_compensation",
    )
    add(
        "XC_K",
        r.x_capacitance_F * math.pi * s.fsw if xc_on else 0.0,
        "f",
        "A/V",
        "C_x pi fsw: the X capacitor's current amplitude C_x w V_pk is XC_K V_pk / (half "
        "period in switching periods)",
        f"[plant] x_capacitance = {r.x_capacitance_F:.4g} F" if xc_on else "off",
        (ib / vb, 15),
    )
    iref_max = min(IREF_MAX_OF_PEAK * prj.sizing.iline_peak_A, IREF_MAX_OF_OC * r.oc_trip_A)
    add(
        "IREF_MAX_A",
        iref_max,
        "f",
        "A",
        "largest current reference",
        f"min({IREF_MAX_OF_PEAK:g} x sized peak line current, {IREF_MAX_OF_OC:g} x oc_trip)",
        (ib, 15),
    )
    add(
        "VBUS_GUARD_V",
        s.vout + VBUS_GUARD_OF_SPAN * (r.ov_trip_V - s.vout),
        "f",
        "V",
        "bus above which the current reference is 0",
        f"vout + {VBUS_GUARD_OF_SPAN:g} (ov_trip - vout)",
        (vb, 15),
    )
    f_res = filter_resonance_Hz(prj.config)
    n_ramp = max(1, math.ceil(GUARD_RAMP_RESONANCES * s.fsw / f_res)) if f_res else 1
    add(
        "FF_STEP_WINDOW",
        n_ramp if f_res else 0,
        "u",
        "periods",
        "a line step up opens this window, in which the feedforward passes steps at once",
        (
            f"ceil({GUARD_RAMP_RESONANCES:g} fsw / f_res): the ring the step starts"
            if f_res
            else "0: no input filter, every period is in one"
        ),
    )
    add(
        "GUARD_STEP",
        1.0 / n_ramp,
        "f",
        "1",
        "the bus guard's factor on the current reference moves by this each period: down to 0 "
        "while the bus is above VBUS_GUARD_V, back to 1 below it",
        (
            f"1 / ceil({GUARD_RAMP_RESONANCES:g} fsw / f_res), f_res = {f_res:.4g} Hz the input "
            "filter's resonance"
            if f_res
            else "1: at once (no input filter)"
        ),
        (1.0, 15),
    )
    add(
        "IKP",
        i.kp,
        "f",
        "1/A",
        "current PI proportional gain",
        f"tuning: {i.target_crossover_Hz:.6g} Hz, {i.target_phase_margin_deg:g} deg",
        (1.0 / ib, 15),
    )
    add(
        "IKI_TS",
        i.ki_ts,
        "f",
        "1/A",
        "current PI integral gain x PWM period (backward Euler)",
        f"tuning: Ki = {i.ki:.6g} 1/(A s)",
        (1.0 / ib, 31),
    )
    fc = prj.resolved.ff_corner_Hz
    add(
        "FF_K",
        ff_step(fc, s.fsw),
        "f",
        "1",
        "step of the first-order low-pass on |v| feeding the duty feedforward, "
        "1 - exp(-2 pi f_c / fsw)",
        f"[control] ff_corner = {fc:.6g} Hz"
        + (
            ""
            if prj.config.control.ff_corner
            else (f" (rule: fsw / {s.fsw / fc:g})" if math.isfinite(fc) else " (no input filter)")
        ),
        (1.0, 15),
    )
    vpk_min = math.sqrt(2.0) * prj.config.spec.vin_rms_min
    add(
        "FF_STEP_V",
        FF_STEP_OF_VPK_MIN * vpk_min,
        "f",
        "V",
        "a change of |v| beyond this from the feedforward's filtered value is a line step (a "
        "dip's end, a swell) and passes at once: a filter lag there leaves the duty set for "
        "the old line while the current rises",
        f"rule: {FF_STEP_OF_VPK_MIN:g} x the lowest line peak ({vpk_min:.4g} V); the line "
        "itself moves at most 2 pi f_line Vpk / fsw per period",
        (vb, 15),
    )
    add(
        "DEAD_TIME_DUTY",
        prj.config.plant.dead_time * s.fsw,
        "f",
        "1",
        "duty added to the feedforward 1 - |v|/v_bus while the period's average current is "
        "forward, subtracted while it is reversed: the timer's dead time delays the main "
        "switch's turn-on, and the current then flows in the body diode its sign picks "
        "(dead-time compensation by the current's sign, common practice)",
        "[plant] dead_time x [spec] fsw",
        (1.0, 15),
    )
    add(
        "INV_VBUS_MIN",
        1.0 / r.vbus_range_V,
        "f",
        "1/V",
        "smallest 1/v_bus estimate",
        "1/[sensing] vbus_range",
        (1.0 / vb, 15),
    )
    add(
        "INV_VBUS_MAX",
        1.0 / (0.5 * math.sqrt(2.0) * r.brownout_off_rms_V),
        "f",
        "1/V",
        "largest 1/v_bus estimate",
        "1/(half the brown-out line peak)",
        (1.0 / vb, 15),
    )


def pwm(add: Add, prj: Project) -> None:
    c = prj.config.control
    ramp = c.zc_ramp_periods
    add(
        "PWM_PERIOD_COUNTS",
        prj.resolved.pwm_period_counts,
        "u",
        "counts",
        "timer counts per PWM period",
        "[control] pwm_timer_clock/[spec] fsw",
    )
    add(
        "DUTY_MAX",
        c.duty_max,
        "f",
        "1",
        "largest main-switch duty",
        "[control] duty_max",
        (1.0, 15),
    )
    add(
        "ZC_RAMP_PERIODS",
        ramp,
        "u",
        "periods",
        "main-switch duty ramp after a zero crossing",
        "[control] zc_ramp_periods",
    )
    add(
        "RAMP_STEP",
        c.duty_max / ramp if ramp else c.duty_max,
        "f",
        "1/period",
        "duty-limit increase per period of the ramp",
        "duty_max/zc_ramp_periods",
        (1.0, 15),
    )
    add(
        "SYNC_DELAY_PERIODS",
        c.sync_delay_periods,
        "u",
        "periods",
        "synchronous switch enabled this long after the ramp",
        "[control] sync_delay_periods",
    )


def protection(add: Add, prj: Project) -> None:
    s, pr, r = prj.config.spec, prj.config.protection, prj.resolved
    fsw, vb = s.fsw, r.vbus_range_V
    add(
        "OV_TRIP_V",
        r.ov_trip_V,
        "f",
        "V",
        "bus over-voltage trip",
        "[protection] ov_trip",
        (vb, 15),
    )
    add(
        "OC_TRIP_A",
        r.oc_trip_A,
        "f",
        "A",
        "inductor over-current trip",
        "[protection] oc_trip",
        (r.il_range_A, 15),
    )
    add(
        "DIODE_MARGIN_V",
        DIODE_MARGIN_OF_VOUT * s.vout,
        "f",
        "V",
        "|v_line| within this of the bus counts as at or above it: over-current there is the "
        "line rectified through the body diodes (recorded, not tripped on, while the bus "
        "reading is within BUS_LOW_MARGIN_V below the line)",
        f"rule: {100 * DIODE_MARGIN_OF_VOUT:g} % of [spec] vout",
        (vb, 15),
    )
    add(
        "PRECHARGE_K",
        2.0 * PRECHARGE_OF_PEAK**2,
        "f",
        "1",
        f"bus counts as precharged when vbus^2 >= K x ms ({100 * PRECHARGE_OF_PEAK:g} % of the "
        "line "
        "peak)",
        f"rule: {PRECHARGE_OF_PEAK:g} x line peak",
        (1.0, 15),
    )
    add(
        "LINE_LOSS_PERIODS",
        max(1, round(pr.line_loss_time * fsw)),
        "u",
        "periods",
        "|v| below blanking this long = line loss",
        "[protection] line_loss_time x fsw",
    )
    add(
        "LINE_LOSS_RESET_PERIODS",
        u32(LINE_LOSS_RESET_S * fsw),
        "u",
        "periods",
        "outage after which the start is afresh",
        f"rule: {LINE_LOSS_RESET_S:g} s",
    )
    add(
        "RETRY_LIMIT",
        pr.retry_limit,
        "u",
        "trips",
        "trips before the fault latches",
        "[protection] retry_limit",
    )
    add(
        "RETRY_DELAY_PERIODS",
        u32(round(pr.retry_delay * fsw)),
        "u",
        "periods",
        "wait after a trip",
        "[protection] retry_delay x fsw",
    )
    add(
        "TRIP_DECAY_PERIODS",
        u32(TRIP_DECAY_S * fsw),
        "u",
        "periods",
        "clean running that takes one trip off the count: at most RETRY_LIMIT - 1 + 60 s / "
        f"{TRIP_DECAY_S:g} s restarts a minute, latched after",
        f"rule: {TRIP_DECAY_S:g} s",
    )
