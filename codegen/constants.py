"""Every constant of the generated C, with its unit and where it came from.

Input: the validated config, the resolved numbers, the loop tuning and the sized
peak line current (a plain float, so this module needs nothing of the plant).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .config import Config
from .resolve import Resolved
from .tuning import BUS_BLOCKS, Tuning


FREQ_TOL = 0.01  # the frequency estimate is good to 0.5 %; the band edges get twice that


@dataclass(frozen=True)
class Const:
    name: str  # without prefix
    value: float
    kind: str  # "f" float, "u" unsigned integer
    unit: str
    doc: str
    origin: str
    group: str
    q_base: float = 1.0  # q15 builds: the value is stored as round(value / q_base * 2^q_bits) in int32
    q_bits: int = 15

    def literal(self, number_format: str = "float32") -> str:
        if self.kind == "u":
            return f"{int(self.value)}u"
        if number_format == "q15" and self.kind == "f":
            n = int(round(self.value / self.q_base * 2.0**self.q_bits))
            if not -(2**31) <= n < 2**31:
                raise ValueError(f"{self.name} = {self.value:g} does not fit int32 as Q{self.q_bits} of {self.q_base:g}")
            return f"((int32_t){n})"
        text = f"{float(self.value):.9g}"
        if "e" not in text and "." not in text and "inf" not in text and "nan" not in text:
            text += ".0"
        return f"({text}f)"

    @property
    def fixed_note(self) -> str:
        return f"Q{self.q_bits} of {self.q_base:.6g}"


def _u(x: float) -> int:
    v = int(x)
    if v < 0 or v > 0xFFFFFFFF:
        raise ValueError(f"constant {x} does not fit an unsigned 32-bit value")
    return v


def build_constants(cfg: Config, r: Resolved, tun: Tuning, iline_peak_A: float) -> list[Const]:
    s, c, pr, se = cfg.spec, cfg.control, cfg.protection, cfg.sensing
    fsw = s.fsw
    half_code = float(2 ** (se.adc_bits - 1))
    full = r.adc_full_counts
    half_min = math.floor(fsw / (2.0 * pr.freq_max * 1.25))
    half_max = math.ceil(fsw / (2.0 * pr.freq_min * 0.8))
    if half_max > 65535:
        raise ValueError("fsw/line frequency ratio too large for 16-bit half-period counters")
    ramp = c.zc_ramp_periods
    out: list[Const] = []
    VB, IB = r.vbus_range_V, r.il_range_A  # per-unit bases of the q15 build
    PB = VB * IB

    def add(group, name, value, kind, unit, doc, origin, q=(1.0, 15)):
        out.append(Const(name, value, kind, unit, doc, origin, group, q[0], q[1]))

    g = "Per-unit bases (q15 builds store signals as value/base x 2^15)"
    add(g, "V_BASE_V", VB, "b", "V", "voltage base (float in every build: for conversions on a host)", "[sensing] vbus_range")
    add(g, "I_BASE_A", IB, "b", "A", "current base", "[sensing] il_range")
    add(g, "P_BASE_W", PB, "b", "W", "power base", "V_BASE_V x I_BASE_A")

    g = "ADC and sensing"
    add(g, "ADC_FULL_COUNTS", full, "u", "counts", "largest ADC code", f"[sensing] adc_bits = {se.adc_bits}")
    add(g, "RAIL_LO_COUNTS", 2, "u", "counts", "at or below: channel at its low rail", "rule: 2 codes from the rail")
    add(g, "RAIL_HI_COUNTS", full - 2, "u", "counts", "at or above: channel at its high rail", "rule: 2 codes from the rail")
    add(g, "RAIL_PERIODS", se.rail_periods, "u", "periods", "consecutive railed samples before a sensor fault", "[sensing] rail_periods")
    add(g, "VAC_OFFSET_COUNTS", r.vac_offset_counts, "f", "counts", "line channel code at 0 V", "[sensing] vac_offset", (1.0, 0))
    add(g, "VAC_V_PER_COUNT", r.vac_range_V / half_code, "f", "V/count", "line channel scale", f"[sensing] vac_range = {r.vac_range_V:.6g} V over {half_code:.0f} codes", (VB, 31))
    add(g, "IL_OFFSET_COUNTS", r.il_offset_counts, "f", "counts", "current channel code at 0 A", "[sensing] il_offset", (1.0, 0))
    add(g, "IL_A_PER_COUNT", r.il_range_A / half_code, "f", "A/count", "current channel scale", f"[sensing] il_range = {r.il_range_A:.6g} A over {half_code:.0f} codes", (IB, 31))
    add(g, "VBUS_V_PER_COUNT", r.vbus_range_V / full, "f", "V/count", "bus channel scale", f"[sensing] vbus_range = {r.vbus_range_V:.6g} V over {full} codes", (VB, 31))
    add(g, "STUCK_PERIODS", math.ceil(1.5 * fsw / (2.0 * pr.freq_min)), "u", "periods", "identical line samples away from zero before a stuck fault", "rule: 1.5 x the longest half period")
    add(g, "STUCK_MIN_V", r.zc_blank_V, "f", "V", "|v| above which a frozen line code counts as stuck", "[control] zc_blank_voltage", (VB, 15))

    g = "Polarity and zero crossing"
    add(g, "ZC_HYST_V", r.zc_hysteresis_V, "f", "V", "polarity hysteresis half-band", "[control] zc_hysteresis", (VB, 15))
    add(g, "ZC_DEBOUNCE", c.zc_debounce_periods, "u", "periods", "samples beyond the band before the polarity changes", "[control] zc_debounce_periods")
    add(g, "ZC_BLANK_V", r.zc_blank_V, "f", "V", "|v| below which neither leg switches", "[control] zc_blank_voltage", (VB, 15))
    add(g, "HALF_MIN_PERIODS", half_min, "u", "periods", "shortest plausible half period", "fsw/(2 x 1.25 x [protection] freq_max)")
    add(g, "HALF_MAX_PERIODS", half_max, "u", "periods", "longest plausible half period", "fsw/(2 x 0.8 x [protection] freq_min)")
    add(g, "FSW_MHZ", round(fsw * 1000.0), "u", "mHz", "PWM (control) frequency", "[spec] fsw")
    add(g, "FREQ_MIN_MHZ", round(pr.freq_min * (1.0 - FREQ_TOL) * 1000.0), "u", "mHz",
        "estimate below this: line frequency out of range",
        f"[protection] freq_min less {100 * FREQ_TOL:g} % (twice the estimate's error bound)")
    add(g, "FREQ_MAX_MHZ", round(pr.freq_max * (1.0 + FREQ_TOL) * 1000.0), "u", "mHz",
        "estimate above this: line frequency out of range",
        f"[protection] freq_max plus {100 * FREQ_TOL:g} % (twice the estimate's error bound)")

    g = "RMS and brown-out"
    floor = 0.5 * r.brownout_off_rms_V
    add(g, "MS_FLOOR_V2", floor**2, "f", "V^2", "floor of the mean square before 1/Vrms^2", f"(0.5 x brown-out off {r.brownout_off_rms_V:.4g} V)^2", (VB * VB, 30))
    add(g, "MS_NOMINAL_V2", s.vin_rms_nominal**2, "f", "V^2", "mean square assumed before the first half cycle", "[spec] vin_rms_nominal^2", (VB * VB, 30))
    add(g, "RMS_RISE_K", 2.0 * 1.15**2, "f", "1", "v^2 above K x ms: the line stepped up (K = 2 x 1.15^2: 15 % over the latched peak)", "rule: 15 % margin over the peak", (1.0, 15))
    add(g, "RMS_RISE_INV", 1.0 / (2.0 * 1.15**2), "f", "1", "1/RMS_RISE_K", "1/RMS_RISE_K", (1.0, 15))
    add(g, "BO_OFF_V2", r.brownout_off_rms_V**2, "f", "V^2", "brown-out below this mean square", "[protection] brownout_off_rms^2", (VB * VB, 30))
    add(g, "BO_ON_V2", r.brownout_on_rms_V**2, "f", "V^2", "restart above this mean square", "[protection] brownout_on_rms^2", (VB * VB, 30))

    g = "Voltage loop"
    shift = BUS_BLOCKS.bit_length() - 1
    add(g, "BUS_BLOCKS", BUS_BLOCKS, "u", "blocks", "blocks in the sliding half-cycle bus average", "design: power of two")
    add(g, "BUS_BLOCK_SHIFT", shift, "u", "bits", "block length = half period >> shift", "log2(BUS_BLOCKS)")
    add(g, "BUS_BLOCK_NOMINAL", max(1, round(fsw / (2.0 * s.line_freq)) >> shift), "u", "periods", "block length before the first measured half", "fsw/(2 line_freq)/BUS_BLOCKS")
    add(g, "VOUT_V", s.vout, "f", "V", "bus reference", "[spec] vout", (VB, 31))
    add(g, "VREF_STEP_V", s.vout / (c.soft_start_time * fsw), "f", "V/period", "soft-start reference slope", "vout/([control] soft_start_time x fsw)", (VB, 31))
    slope = s.vout / c.soft_start_time
    add(g, "RAMP_FF_W_PER_V", r.capacitance_F * slope / s.efficiency, "f", "W/V", "ramp feedforward: capacitor charging power per volt of reference", f"C x vout/soft_start_time / efficiency, C = {r.capacitance_F:.6g} F", (PB / VB, 15))
    step = s.vout / (c.soft_start_time * fsw)
    add(g, "RAMP_LAG_V", step * fsw / (2.0 * s.line_freq) / 2.0, "f", "V", "lag of the half-cycle bus mean behind the ramp", "VREF_STEP_V x half a half-period of samples", (VB, 15))
    add(g, "VKP", tun.voltage.kp, "f", "W/V", "voltage PI proportional gain", f"tuning: {tun.voltage.target_crossover_Hz:g} Hz, {tun.voltage.target_phase_margin_deg:g} deg", (PB / VB, 15))
    add(g, "VKI_TS", tun.voltage.ki_ts, "f", "W/V", "voltage PI integral gain x block period (backward Euler)", f"tuning: Ki = {tun.voltage.ki:.6g} W/(V s), T = {tun.voltage.ts_s:.6g} s", (PB / VB, 31))
    add(g, "PCMD_MAX_W", 1.3 * s.power / s.efficiency, "f", "W", "largest input power command", "1.3 x [spec] power/efficiency", (PB, 15))

    g = "Current reference and loop"
    add(g, "IREF_MAX_A", min(1.25 * iline_peak_A, 0.85 * r.oc_trip_A), "f", "A", "largest current reference", "min(1.25 x sized peak line current, 0.85 x oc_trip)", (IB, 15))
    add(g, "VBUS_GUARD_V", s.vout + 0.6 * (r.ov_trip_V - s.vout), "f", "V", "bus above which the current reference is 0", "vout + 0.6 (ov_trip - vout)", (VB, 15))
    add(g, "IKP", tun.current.kp, "f", "1/A", "current PI proportional gain", f"tuning: {tun.current.target_crossover_Hz:.6g} Hz, {tun.current.target_phase_margin_deg:g} deg", (1.0 / IB, 15))
    add(g, "IKI_TS", tun.current.ki_ts, "f", "1/A", "current PI integral gain x PWM period (backward Euler)", f"tuning: Ki = {tun.current.ki:.6g} 1/(A s)", (1.0 / IB, 31))
    add(g, "INV_VBUS_MIN", 1.0 / r.vbus_range_V, "f", "1/V", "smallest 1/v_bus estimate", "1/[sensing] vbus_range", (1.0 / VB, 15))
    add(g, "INV_VBUS_MAX", 1.0 / (0.5 * math.sqrt(2.0) * r.brownout_off_rms_V), "f", "1/V", "largest 1/v_bus estimate", "1/(half the brown-out line peak)", (1.0 / VB, 15))

    g = "PWM"
    add(g, "PWM_PERIOD_COUNTS", r.pwm_period_counts, "u", "counts", "timer counts per PWM period", "[control] pwm_timer_clock/[spec] fsw")
    add(g, "DUTY_MAX", c.duty_max, "f", "1", "largest main-switch duty", "[control] duty_max", (1.0, 15))
    add(g, "ZC_RAMP_PERIODS", ramp, "u", "periods", "main-switch duty ramp after a zero crossing", "[control] zc_ramp_periods")
    add(g, "RAMP_STEP", c.duty_max / ramp if ramp else c.duty_max, "f", "1/period", "duty-limit increase per period of the ramp", "duty_max/zc_ramp_periods", (1.0, 15))
    add(g, "SYNC_DELAY_PERIODS", c.sync_delay_periods, "u", "periods", "synchronous switch enabled this long after the ramp", "[control] sync_delay_periods")

    g = "Supervisor and protection"
    add(g, "OV_TRIP_V", r.ov_trip_V, "f", "V", "bus over-voltage trip", "[protection] ov_trip", (VB, 15))
    add(g, "OC_TRIP_A", r.oc_trip_A, "f", "A", "inductor over-current trip", "[protection] oc_trip", (IB, 15))
    add(g, "DIODE_MARGIN_V", 0.02 * s.vout, "f", "V",
        "|v_line| within this of the bus counts as at or above it: over-current there is the line rectified "
        "through the body diodes (recorded, not tripped on)", "rule: 2 % of [spec] vout", (VB, 15))
    add(g, "PRECHARGE_K", 2.0 * 0.85**2, "f", "1", "bus counts as precharged when vbus^2 >= K x ms (85 % of the line peak)", "rule: 0.85 x line peak", (1.0, 15))
    add(g, "LINE_LOSS_PERIODS", max(1, round(pr.line_loss_time * fsw)), "u", "periods", "|v| below blanking this long = line loss", "[protection] line_loss_time x fsw")
    add(g, "LINE_LOSS_RESET_PERIODS", _u(0.5 * fsw), "u", "periods", "outage after which the start is afresh", "rule: 0.5 s")
    add(g, "RETRY_LIMIT", pr.retry_limit, "u", "trips", "trips before the fault latches", "[protection] retry_limit")
    add(g, "RETRY_DELAY_PERIODS", _u(round(pr.retry_delay * fsw)), "u", "periods", "wait after a trip", "[protection] retry_delay x fsw")
    add(g, "RETRY_CLEAR_PERIODS", _u(0.5 * fsw), "u", "periods", "clean running that clears the trip count", "rule: 0.5 s")
    return out
