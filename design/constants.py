"""Every constant of the generated C, with its unit and where it came from.

A table of short rows, one group of the firmware at a time; each rule's number is a named
module constant, written once.  Values are SI (float builds store them as they are; q15
builds as ``round(value / q_base x 2^q_bits)`` in int32, see ``codegen.literals``).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from .project import Project
from .tuning import BUS_BLOCKS

# rules of the firmware (fractions of the named quantity unless a unit is given)
RAIL_MARGIN_COUNTS = 2  # a code this close to either end counts as railed
STUCK_OF_HALF = 1.5  # a frozen line code for this many of the longest half periods is stuck
HALF_MIN_FREQ_MARGIN = 1.25  # shortest plausible half: at freq_max times this
HALF_MAX_FREQ_MARGIN = 0.8  # longest plausible half: at freq_min times this
FREQ_TOL = 0.01  # the frequency estimate is good to 0.5 %; the band edges get twice that
MS_FLOOR_OF_BROWNOUT = 0.5  # floor of the rms before 1/Vrms^2: of the brown-out stop level
RMS_RISE_MARGIN = 1.15  # a sample this far above the latched peak raises the rms at once
PCMD_MAX_OF_RATED = 1.3  # largest power command: of rated input power
IREF_MAX_OF_PEAK = 1.25  # largest current reference: of the sized peak line current ...
IREF_MAX_OF_OC = 0.85  # ... and of the over-current trip, the smaller of the two
VBUS_GUARD_OF_SPAN = 0.6  # reference zeroed above vout + this x (ov_trip - vout)
DIODE_MARGIN_OF_VOUT = 0.02  # |v| within this of the bus: the line rectified by the diodes
PRECHARGE_OF_PEAK = 0.85  # bus precharged at this fraction of the line peak
LINE_LOSS_RESET_S = 0.5  # an outage longer than this (s) starts afresh
RETRY_CLEAR_S = 0.5  # clean running that clears the trip count (s)


@dataclass(frozen=True)
class Const:
    """One C constant: ``kind`` "f" a real (float or Q), "u" unsigned integer, "b" a float
    in every build (per-unit bases, for conversions on a host)."""

    name: str  # without prefix
    value: float
    kind: str
    unit: str
    doc: str
    origin: str
    group: str
    q_base: float = 1.0
    q_bits: int = 15

    @property
    def fixed_note(self) -> str:
        return f"Q{self.q_bits} of {self.q_base:.6g}"


Add = Callable[..., None]


def _u32(x: float) -> int:
    v = int(x)
    if v < 0 or v > 0xFFFFFFFF:
        raise ValueError(f"constant {x} does not fit an unsigned 32-bit value")
    return v


def _bases(add: Add, prj: Project) -> None:
    r = prj.resolved
    vb, ib = r.vbus_range_V, r.il_range_A
    add(
        "V_BASE_V",
        vb,
        "b",
        "V",
        "voltage base (float in every build: for conversions on a host)",
        "[sensing] vbus_range",
    )
    add("I_BASE_A", ib, "b", "A", "current base", "[sensing] il_range")
    add("P_BASE_W", vb * ib, "b", "W", "power base", "V_BASE_V x I_BASE_A")


def _sensing(add: Add, prj: Project) -> None:
    r, pr, se = prj.resolved, prj.config.protection, prj.config.sensing
    full, half, vb, ib = r.adc_full_counts, r.adc_half_counts, r.vbus_range_V, r.il_range_A
    rule = f"rule: {RAIL_MARGIN_COUNTS} codes from the rail"
    add(
        "ADC_FULL_COUNTS",
        full,
        "u",
        "counts",
        "largest ADC code",
        f"[sensing] adc_bits = {se.adc_bits}",
    )
    add(
        "RAIL_LO_COUNTS",
        RAIL_MARGIN_COUNTS,
        "u",
        "counts",
        "at or below: channel at its low rail",
        rule,
    )
    add(
        "RAIL_HI_COUNTS",
        full - RAIL_MARGIN_COUNTS,
        "u",
        "counts",
        "at or above: channel at its high rail",
        rule,
    )
    add(
        "RAIL_PERIODS",
        se.rail_periods,
        "u",
        "periods",
        "consecutive railed samples before a sensor fault",
        "[sensing] rail_periods",
    )
    add(
        "VAC_OFFSET_COUNTS",
        r.vac_offset_counts,
        "f",
        "counts",
        "line channel code at 0 V",
        "[sensing] vac_offset",
        (1.0, 0),
    )
    add(
        "VAC_V_PER_COUNT",
        r.vac_V_per_count,
        "f",
        "V/count",
        "line channel scale",
        f"[sensing] vac_range = {r.vac_range_V:.6g} V over {half:.0f} codes",
        (vb, 31),
    )
    add(
        "IL_OFFSET_COUNTS",
        r.il_offset_counts,
        "f",
        "counts",
        "current channel code at 0 A",
        "[sensing] il_offset",
        (1.0, 0),
    )
    add(
        "IL_A_PER_COUNT",
        r.il_A_per_count,
        "f",
        "A/count",
        "current channel scale",
        f"[sensing] il_range = {r.il_range_A:.6g} A over {half:.0f} codes",
        (ib, 31),
    )
    add(
        "VBUS_V_PER_COUNT",
        r.vbus_V_per_count,
        "f",
        "V/count",
        "bus channel scale",
        f"[sensing] vbus_range = {r.vbus_range_V:.6g} V over {full} codes",
        (vb, 31),
    )
    add(
        "STUCK_PERIODS",
        math.ceil(STUCK_OF_HALF * prj.config.spec.fsw / (2.0 * pr.freq_min)),
        "u",
        "periods",
        "identical line samples away from zero before a stuck fault",
        f"rule: {STUCK_OF_HALF:g} x the longest half period",
    )
    add(
        "STUCK_MIN_V",
        r.zc_blank_V,
        "f",
        "V",
        "|v| above which a frozen line code counts as stuck",
        "[control] zc_blank_voltage",
        (vb, 15),
    )


def _polarity(add: Add, prj: Project) -> None:
    c, pr, r = prj.config.control, prj.config.protection, prj.resolved
    fsw, vb = prj.config.spec.fsw, r.vbus_range_V
    half_min = math.floor(fsw / (2.0 * pr.freq_max * HALF_MIN_FREQ_MARGIN))
    half_max = math.ceil(fsw / (2.0 * pr.freq_min * HALF_MAX_FREQ_MARGIN))
    if half_max > 65535:
        raise ValueError("fsw/line frequency ratio too large for 16-bit half-period counters")
    tol = f"{100 * FREQ_TOL:g} % (twice the estimate's error bound)"
    add(
        "ZC_HYST_V",
        r.zc_hysteresis_V,
        "f",
        "V",
        "polarity hysteresis half-band",
        "[control] zc_hysteresis",
        (vb, 15),
    )
    add(
        "ZC_DEBOUNCE",
        c.zc_debounce_periods,
        "u",
        "periods",
        "samples beyond the band before the polarity changes",
        "[control] zc_debounce_periods",
    )
    add(
        "ZC_BLANK_V",
        r.zc_blank_V,
        "f",
        "V",
        "|v| below which neither leg switches",
        "[control] zc_blank_voltage",
        (vb, 15),
    )
    add(
        "HALF_MIN_PERIODS",
        half_min,
        "u",
        "periods",
        "shortest plausible half period",
        f"fsw/(2 x {HALF_MIN_FREQ_MARGIN:g} x [protection] freq_max)",
    )
    add(
        "HALF_MAX_PERIODS",
        half_max,
        "u",
        "periods",
        "longest plausible half period",
        f"fsw/(2 x {HALF_MAX_FREQ_MARGIN:g} x [protection] freq_min)",
    )
    add("FSW_MILLIHZ", round(fsw * 1000.0), "u", "mHz", "PWM (control) frequency", "[spec] fsw")
    add(
        "FREQ_MIN_MILLIHZ",
        round(pr.freq_min * (1.0 - FREQ_TOL) * 1000.0),
        "u",
        "mHz",
        "estimate below this: line frequency out of range",
        f"[protection] freq_min less {tol}",
    )
    add(
        "FREQ_MAX_MILLIHZ",
        round(pr.freq_max * (1.0 + FREQ_TOL) * 1000.0),
        "u",
        "mHz",
        "estimate above this: line frequency out of range",
        f"[protection] freq_max plus {tol}",
    )


def _rms(add: Add, prj: Project) -> None:
    r, s = prj.resolved, prj.config.spec
    v2 = (r.vbus_range_V**2, 30)
    floor = MS_FLOOR_OF_BROWNOUT * r.brownout_off_rms_V
    rise = 2.0 * RMS_RISE_MARGIN**2
    add(
        "MS_FLOOR_V2",
        floor**2,
        "f",
        "V^2",
        "floor of the mean square before 1/Vrms^2",
        f"({MS_FLOOR_OF_BROWNOUT:g} x brown-out off {r.brownout_off_rms_V:.4g} V)^2",
        v2,
    )
    add(
        "MS_NOMINAL_V2",
        s.vin_rms_nominal**2,
        "f",
        "V^2",
        "mean square assumed before the first half cycle",
        "[spec] vin_rms_nominal^2",
        v2,
    )
    pct = f"{100 * (RMS_RISE_MARGIN - 1):.0f} %"
    add(
        "RMS_RISE_K",
        rise,
        "f",
        "1",
        f"v^2 above K x ms: the line stepped up (K = 2 x "
        f"{RMS_RISE_MARGIN:g}^2: {pct} over the latched peak)",
        f"rule: {pct} margin over the peak",
        (1.0, 15),
    )
    add("RMS_RISE_INV", 1.0 / rise, "f", "1", "1/RMS_RISE_K", "1/RMS_RISE_K", (1.0, 15))
    add(
        "BO_OFF_V2",
        r.brownout_off_rms_V**2,
        "f",
        "V^2",
        "brown-out below this mean square",
        "[protection] brownout_off_rms^2",
        v2,
    )
    add(
        "BO_ON_V2",
        r.brownout_on_rms_V**2,
        "f",
        "V^2",
        "restart above this mean square",
        "[protection] brownout_on_rms^2",
        v2,
    )


def _vloop(add: Add, prj: Project) -> None:
    s, c, r, v = prj.config.spec, prj.config.control, prj.resolved, prj.tuning.voltage
    fsw, vb, pb = s.fsw, r.vbus_range_V, r.vbus_range_V * r.il_range_A
    shift = BUS_BLOCKS.bit_length() - 1
    step = s.vout / (c.soft_start_time * fsw)
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
        "vout/([control] soft_start_time x fsw)",
        (vb, 31),
    )
    add(
        "RAMP_FF_W_PER_V",
        r.capacitance_F * (s.vout / c.soft_start_time) / s.efficiency,
        "f",
        "W/V",
        "ramp feedforward: capacitor charging power per volt of reference",
        f"C x vout/soft_start_time / efficiency, C = {r.capacitance_F:.6g} F",
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
        "PCMD_MAX_W",
        PCMD_MAX_OF_RATED * s.power / s.efficiency,
        "f",
        "W",
        "largest input power command",
        f"{PCMD_MAX_OF_RATED:g} x [spec] power/efficiency",
        (pb, 15),
    )


def _iloop(add: Add, prj: Project) -> None:
    s, r, i = prj.config.spec, prj.resolved, prj.tuning.current
    vb, ib = r.vbus_range_V, r.il_range_A
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


def _pwm(add: Add, prj: Project) -> None:
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


def _protection(add: Add, prj: Project) -> None:
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
        "line rectified through the body diodes (recorded, not tripped on)",
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
        _u32(LINE_LOSS_RESET_S * fsw),
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
        _u32(round(pr.retry_delay * fsw)),
        "u",
        "periods",
        "wait after a trip",
        "[protection] retry_delay x fsw",
    )
    add(
        "RETRY_CLEAR_PERIODS",
        _u32(RETRY_CLEAR_S * fsw),
        "u",
        "periods",
        "clean running that clears the trip count",
        f"rule: {RETRY_CLEAR_S:g} s",
    )


GROUPS: list[tuple[str, Callable[[Add, Project], None]]] = [
    ("Per-unit bases (q15 builds store signals as value/base x 2^15)", _bases),
    ("ADC and sensing", _sensing),
    ("Polarity and zero crossing", _polarity),
    ("RMS and brown-out", _rms),
    ("Voltage loop", _vloop),
    ("Current reference and loop", _iloop),
    ("PWM", _pwm),
    ("Supervisor and protection", _protection),
]


def build_constants(prj: Project) -> list[Const]:
    """Every constant of ``<prefix>_config.h``, in header order."""
    out: list[Const] = []
    for group, rows in GROUPS:

        def add(
            name: str,
            value: float,
            kind: str,
            unit: str,
            doc: str,
            origin: str,
            q: tuple[float, int] = (1.0, 15),
            group: str = group,
        ) -> None:
            out.append(Const(name, value, kind, unit, doc, origin, group, q[0], q[1]))

        rows(add, prj)
    return out
