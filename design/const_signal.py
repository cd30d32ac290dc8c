"""Constants of the signal chain: per-unit bases, the ADC and sensing, polarity and zero
crossing, RMS and brown-out (rows of ``design.constants``)."""

from __future__ import annotations

import math

from .project import Project
from .rules import (
    FREQ_TOL,
    HALF_MAX_FREQ_MARGIN,
    HALF_MIN_FREQ_MARGIN,
    MS_FLOOR_OF_BROWNOUT,
    RAIL_MARGIN_COUNTS,
    RMS_RISE_MARGIN,
    STUCK_OF_HALF,
    ZC_NEAR_MARGIN_PERIODS,
    Add,
)


def bases(add: Add, prj: Project) -> None:
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


def sensing(add: Add, prj: Project) -> None:
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
    if r.line_split:
        add(
            "LN_V_PER_COUNT",
            r.ln_V_per_count,
            "f",
            "V/count",
            "L and N channel scale (split line sensing: line = (vl - vn) x this)",
            f"[sensing] ln_range = {r.ln_range_V:.6g} V over {full} codes",
            (vb, 31),
        )
    else:
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


def polarity(add: Add, prj: Project) -> None:
    c, pr, r = prj.config.control, prj.config.protection, prj.resolved
    fsw, vb = prj.config.spec.fsw, r.vbus_range_V
    half_min = math.floor(fsw / (2.0 * pr.freq_max * HALF_MIN_FREQ_MARGIN))
    half_max = math.ceil(fsw / (2.0 * pr.freq_min * HALF_MAX_FREQ_MARGIN))
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
        r.zc_debounce_periods,
        "u",
        "periods",
        "samples beyond the band before the polarity changes",
        "[control] zc_debounce_periods"
        + (
            ""
            if c.zc_debounce_periods is not None
            else " (default: 2, or past half the filter's resonance)"
        ),
    )
    add(
        "ZC_NEAR_PERIODS",
        r.zc_debounce_periods + ZC_NEAR_MARGIN_PERIODS,
        "u",
        "periods",
        "the polarity changes only with the line inside the hysteresis band this recently: a "
        "real crossing passes through it (the line moves a few volts a period), a failed or "
        "jumping reading does not",
        f"ZC_DEBOUNCE + {ZC_NEAR_MARGIN_PERIODS}",
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


def rms(add: Add, prj: Project) -> None:
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
