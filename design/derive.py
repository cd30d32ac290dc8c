"""Fill the config values left to be derived (from the sizing numbers) and check them.

Each default rule's number is written once, as a module constant here.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from .config import Config, ConfigError
from .filter import step_peak
from .rules import (
    BLANK_OF_VPK_MIN,
    BROWNOUT_OFF_OF_VMIN,
    BROWNOUT_ON_OF_VMIN,
    CURRENT_BW_DIVISOR,
    CURRENT_BW_DIVISOR_EDGE,
    CURRENT_BW_OF_FRES,
    DEVICE_OF_OC,
    FF_CORNER_DIVISOR,
    HW_OV_OF_VOUT,
    HYST_OF_VPK_MIN,
    MAX_PERIOD_COUNTS,
    MIN_PERIOD_COUNTS,
    OC_TRIP_OF_PEAK,
    OV_TRIP_OF_VOUT,
    RANGE_MARGIN,
    SOFT_START_CHARGE_OF_RATED,
    SOFT_START_MIN_S,
    X_CAP_PER_W,
)
from .schema import PlantTable

MU_0 = 4e-7 * math.pi  # H/m
NODE_C_OHM_F = 8e-12  # default node capacitance x rds_on_fast (ohm F), illustrative
# default slow-leg node capacitance: a superjunction pair's time-related output capacitance x
# rds_on_slow (ohm F), or two line-frequency rectifiers' junctions (F); illustrative
SLOW_NODE_C_OHM_F = 1.5e-10
SLOW_NODE_C_DIODE_F = 100e-12
ZC_DEBOUNCE_MIN = 2  # samples beyond the hysteresis band before the polarity changes
ZC_DEBOUNCE_MAX = 64  # ... and at most (the key's range; the detector's counter is 8 bits)
CORE_MU_E = 60.0  # effective permeability of the default gapped core, illustrative


@dataclass(frozen=True)
class Resolved:
    """Every number the controller and the plant need, SI units in the names."""

    inductance_H: float
    capacitance_F: float
    current_bandwidth_Hz: float
    ff_corner_Hz: float
    soft_start_s: float
    node_capacitance_F: float
    slow_node_capacitance_F: float
    x_capacitance_F: float  # 0: no input filter
    dm_damping_ohm: float
    core_volume_m3: float
    core_flux_per_A: float  # T per ampere of inductor current
    zc_hysteresis_V: float
    zc_debounce_periods: int
    zc_blank_V: float
    ov_trip_V: float
    oc_trip_A: float
    hw_ov_level_V: float
    device_current_A: float
    brownout_off_rms_V: float
    brownout_on_rms_V: float
    vac_range_V: float
    il_range_A: float
    vbus_range_V: float
    vac_offset_counts: float
    il_offset_counts: float
    line_split: bool  # L and N sensed apart (``[sensing] line = "split"``)
    ln_range_V: float
    adc_full_counts: int
    pwm_period_counts: int

    @property
    def adc_half_counts(self) -> float:
        """Codes from the offset to the top of a bipolar channel (2^(bits-1))."""
        return float((self.adc_full_counts + 1) // 2)

    @property
    def vac_V_per_count(self) -> float:
        """Line channel scale: vac_range over half the codes (bipolar)."""
        return self.vac_range_V / self.adc_half_counts

    @property
    def ln_V_per_count(self) -> float:
        """L and N channel scale (split sensing): ln_range over all codes (unipolar)."""
        return self.ln_range_V / self.adc_full_counts

    @property
    def il_A_per_count(self) -> float:
        """Current channel scale: il_range over half the codes (bipolar)."""
        return self.il_range_A / self.adc_half_counts

    @property
    def vbus_V_per_count(self) -> float:
        """Bus channel scale: vbus_range over all codes (unipolar)."""
        return self.vbus_range_V / self.adc_full_counts

    def as_dict(self) -> dict[str, float]:
        return asdict(self)


def x_capacitance_F(cfg: Config) -> float:
    """The input filter's X capacitance (F), ``[plant] x_capacitance`` (0: no filter), by
    default ``X_CAP_PER_W`` times the rated power."""
    return _pick(cfg.plant.x_capacitance, X_CAP_PER_W * cfg.spec.power)


def filter_resonance_Hz(cfg: Config) -> float:
    """The input filter's resonance (Hz): its X capacitor with the grid's and the DM
    inductances in series (the damping resistor across the DM inductor left out); 0 without a
    filter."""
    cx, pl = x_capacitance_F(cfg), cfg.plant
    if cx <= 0.0:
        return 0.0
    return 1.0 / (2.0 * math.pi * math.sqrt((pl.source_inductance + pl.dm_inductance) * cx))


def ff_step(fc_Hz: float, fsw_Hz: float) -> float:
    """The step per period of the first-order low-pass on |v| that feeds the duty feedforward
    and the current reference (the firmware's ``FF_K``): ``1 - exp(-2 pi f_c/f_sw)``, the
    exact discretisation of a first-order lag; 1 (no low-pass) for an infinite corner."""
    return 1.0 - math.exp(-2.0 * math.pi * fc_Hz / fsw_Hz)


def current_bandwidth_default(cfg: Config) -> float:
    """The current loop's default crossover (Hz): f_sw over ``CURRENT_BW_DIVISOR`` (its
    ``_EDGE`` value with the edge-aligned carrier), with an input filter at most its
    resonance over ``CURRENT_BW_OF_FRES``."""
    s, c = cfg.spec, cfg.control
    fc = s.fsw / (CURRENT_BW_DIVISOR_EDGE if c.carrier == "edge" else CURRENT_BW_DIVISOR)
    f_res = filter_resonance_Hz(cfg)
    return min(fc, f_res / CURRENT_BW_OF_FRES) if f_res > 0.0 else fc


def zc_debounce_default(fsw_Hz: float, f_res_Hz: float) -> int:
    """Samples beyond the band before the polarity changes: ``ZC_DEBOUNCE_MIN``, or with an
    input filter one more than half its resonance period in switching periods (its ring after
    a line dropout crosses zero at the resonance, and cannot hold one sign that long)."""
    if f_res_Hz <= 0.0:
        return ZC_DEBOUNCE_MIN
    return max(ZC_DEBOUNCE_MIN, math.ceil(fsw_Hz / (2.0 * f_res_Hz)) + 1)


def slow_node_c_F(pl: PlantTable) -> float:
    """Default capacitance (F) of the slow leg's midpoint for its device kind
    (``[plant] slow_node_capacitance``)."""
    if pl.slow_leg == "diode":
        return SLOW_NODE_C_DIODE_F
    return SLOW_NODE_C_OHM_F / pl.rds_on_slow if pl.rds_on_slow > 0.0 else 0.0


def _pick(value: float | None, default: float) -> float:
    return default if value is None else value


def line_terminal_max_V(cfg: Config, vpk_max_V: float, ov_V: float, inductance_H: float) -> float:
    """The highest voltage the sensed line (the stage's input terminals) can show (V). With an
    input filter, the X capacitor's: the line stepping from 0 to its peak onto a stopped stage
    (an IEC 61000-4-11 interruption ending at the peak, the largest step that standard's dips
    make) rings it past the line, to vpk s with s the filter's peak step response
    (``design.filter.step_peak``, up to 2 undamped), at most the over-voltage trip (above the
    bus the diodes carry its charge into the bus). A larger step (a phase jump near 180
    degrees at the peak) may rail the channel. Without one, the grid's inductance
    L_s stands in series with the boost inductor L: while the rectifier's diodes carry a
    surge into the bus (the line returning onto a sagged bus), the two inductances divide the
    difference between line and bus, and the terminals sit L_s/(L_s + L) of the way from the
    line's peak to the bus, at most the over-voltage trip (a voltage divider of two
    inductances carrying the same current)."""
    cx, pl = x_capacitance_F(cfg), cfg.plant
    if cx > 0.0:
        r_d = _pick(pl.dm_damping, math.sqrt(pl.dm_inductance / cx))
        s = step_peak(
            pl.source_inductance, pl.source_resistance, pl.dm_inductance, pl.dm_resistance, r_d, cx
        )
        return max(vpk_max_V, min(ov_V, vpk_max_V * s))
    share = cfg.plant.source_inductance / (cfg.plant.source_inductance + inductance_H)
    return vpk_max_V + share * max(ov_V - vpk_max_V, 0.0)


def resolve(cfg: Config, inductance_H: float, capacitance_F: float, il_peak_A: float) -> Resolved:
    """Derive the missing values; ``il_peak_A`` is the sized peak inductor current."""
    s, c, pr, se = cfg.spec, cfg.control, cfg.protection, cfg.sensing
    vpk_min = math.sqrt(2.0) * s.vin_rms_min
    vpk_max = math.sqrt(2.0) * s.vin_rms_max
    oc = _pick(pr.oc_trip, OC_TRIP_OF_PEAK * il_peak_A)
    ov = _pick(pr.ov_trip, OV_TRIP_OF_VOUT * s.vout)
    mid = float(2 ** (se.adc_bits - 1))
    cap = _pick(cfg.plant.capacitance, capacitance_F)
    cx = x_capacitance_F(cfg)
    r = Resolved(
        inductance_H=_pick(cfg.plant.inductance, inductance_H),
        capacitance_F=cap,
        current_bandwidth_Hz=_pick(c.current_bandwidth, current_bandwidth_default(cfg)),
        # the feedforward's low-pass keeps the input filter's resonance quiet: none without one
        ff_corner_Hz=_pick(c.ff_corner, s.fsw / FF_CORNER_DIVISOR if cx > 0.0 else math.inf),
        soft_start_s=_pick(c.soft_start_time, soft_start_s(cap, s.vout, s.power)),
        node_capacitance_F=_pick(
            cfg.plant.node_capacitance,
            NODE_C_OHM_F / cfg.plant.rds_on_fast if cfg.plant.rds_on_fast > 0.0 else 0.0,
        ),
        slow_node_capacitance_F=_pick(cfg.plant.slow_node_capacitance, slow_node_c_F(cfg.plant)),
        x_capacitance_F=cx,
        dm_damping_ohm=_pick(
            cfg.plant.dm_damping,
            math.sqrt(cfg.plant.dm_inductance / cx) if cx > 0.0 else 1e9,
        ),
        core_volume_m3=_pick(
            cfg.plant.core_volume,
            CORE_MU_E
            * MU_0
            * _pick(cfg.plant.inductance, inductance_H)
            * il_peak_A**2
            / cfg.plant.core_peak_flux**2,
        ),
        core_flux_per_A=cfg.plant.core_peak_flux / il_peak_A,
        zc_hysteresis_V=_pick(c.zc_hysteresis, HYST_OF_VPK_MIN * vpk_min),
        zc_debounce_periods=(
            c.zc_debounce_periods
            if c.zc_debounce_periods is not None
            else zc_debounce_default(s.fsw, filter_resonance_Hz(cfg))
        ),
        zc_blank_V=_pick(c.zc_blank_voltage, BLANK_OF_VPK_MIN * vpk_min),
        ov_trip_V=ov,
        oc_trip_A=oc,
        hw_ov_level_V=_pick(pr.hw_ov_level, HW_OV_OF_VOUT * s.vout),
        device_current_A=_pick(pr.device_current_limit, DEVICE_OF_OC * oc),
        brownout_off_rms_V=_pick(pr.brownout_off_rms, BROWNOUT_OFF_OF_VMIN * s.vin_rms_min),
        brownout_on_rms_V=_pick(pr.brownout_on_rms, BROWNOUT_ON_OF_VMIN * s.vin_rms_min),
        vac_range_V=_pick(
            se.vac_range,
            RANGE_MARGIN
            * line_terminal_max_V(cfg, vpk_max, ov, _pick(cfg.plant.inductance, inductance_H)),
        ),
        il_range_A=_pick(se.il_range, RANGE_MARGIN * oc),
        vbus_range_V=_pick(se.vbus_range, RANGE_MARGIN * ov),
        vac_offset_counts=_pick(se.vac_offset, mid),
        il_offset_counts=_pick(se.il_offset, mid),
        line_split=se.line == "split",
        ln_range_V=_pick(se.ln_range, _pick(se.vbus_range, RANGE_MARGIN * ov)),
        adc_full_counts=2**se.adc_bits - 1,
        pwm_period_counts=int(round(c.pwm_timer_clock / s.fsw)),
    )
    _check(cfg, r)
    if r.zc_debounce_periods > ZC_DEBOUNCE_MAX:
        f_res = filter_resonance_Hz(cfg)
        raise ConfigError(
            f"{cfg.source}: [plant] x_capacitance = {r.x_capacitance_F:g} F with dm_inductance = "
            f"{cfg.plant.dm_inductance:g} H and source_inductance = "
            f"{cfg.plant.source_inductance:g} H: the input filter resonates at {f_res:.4g} Hz, "
            f"and the zero-crossing debounce would need {r.zc_debounce_periods} samples to "
            f"outlast its ring (at most {ZC_DEBOUNCE_MAX}); an input filter resonates well above "
            "the line (1 uF per kW and 10 uH are typical): lower x_capacitance or dm_inductance"
        )
    if cfg.control.x_cap_compensation == "on" and r.x_capacitance_F <= 0.0:
        raise ConfigError(
            f'{cfg.source}: [control] x_cap_compensation = "on" with [plant] x_capacitance = 0: '
            "there is no X capacitor to compensate; set x_capacitance or turn the compensation off"
        )
    return r


def ramp_charge_W(capacitance_F: float, vout_V: float, time_s: float) -> float:
    """The bus capacitor's charging power at the end of a ramp to ``vout_V`` at the slope
    vout/time: C vout dv/dt (W)."""
    return capacitance_F * vout_V * vout_V / time_s


def soft_start_s(capacitance_F: float, vout_V: float, power_W: float) -> float:
    """The default ramp time (s): the charging power at most SOFT_START_CHARGE_OF_RATED of
    the rated power, and never under SOFT_START_MIN_S."""
    t = capacitance_F * vout_V * vout_V / (SOFT_START_CHARGE_OF_RATED * power_W)
    return max(SOFT_START_MIN_S, t)


def _check(cfg: Config, r: Resolved) -> None:
    src = cfg.source
    s = cfg.spec
    p_ramp = ramp_charge_W(r.capacitance_F, s.vout, r.soft_start_s)
    if p_ramp > s.power:
        raise ConfigError(
            f"{src}: [control] soft_start_time = {r.soft_start_s:g} s: the ramp alone would ask "
            f"{p_ramp:.0f} W to charge the bus (C x vout^2/time, C = {r.capacitance_F:.4g} F), "
            f"more than the rated {s.power:g} W; use at least "
            f"{r.capacitance_F * s.vout**2 / s.power:.3g} s (the default rule gives "
            f"{soft_start_s(r.capacitance_F, s.vout, s.power):.3g} s)"
        )
    vpk_max = math.sqrt(2.0) * s.vin_rms_max
    if r.zc_blank_V <= r.zc_hysteresis_V:
        raise ConfigError(
            f"{src}: [control] zc_blank_voltage = {r.zc_blank_V:g} V: must be > zc_hysteresis = "
            f"{r.zc_hysteresis_V:g} V "
            "(the polarity must settle inside the blanking window)"
        )
    if r.zc_blank_V >= math.sqrt(2.0) * r.brownout_off_rms_V:
        raise ConfigError(
            f"{src}: [control] zc_blank_voltage = {r.zc_blank_V:g} V: must be below the "
            "brown-out line peak "
            f"{math.sqrt(2.0) * r.brownout_off_rms_V:.1f} V"
        )
    if r.brownout_on_rms_V <= r.brownout_off_rms_V:
        raise ConfigError(
            f"{src}: [protection] brownout_on_rms = {r.brownout_on_rms_V:g} V: must be > "
            f"brownout_off_rms = {r.brownout_off_rms_V:g} V (hysteresis)"
        )
    if r.brownout_on_rms_V > s.vin_rms_min:
        raise ConfigError(
            f"{src}: [protection] brownout_on_rms = {r.brownout_on_rms_V:g} V: must be <= "
            f"vin_rms_min = {s.vin_rms_min:g} V"
        )
    if r.ov_trip_V <= s.vout:
        raise ConfigError(
            f"{src}: [protection] ov_trip = {r.ov_trip_V:g} V: must be > vout = {s.vout:g} V"
        )
    for table, key, val, need, unit, what in _range_checks(r, vpk_max):
        if val <= need:
            raise ConfigError(
                f"{src}: [{table}] {key} = {val:g} {unit}: must exceed {what} = {need:.4g} {unit}"
            )
    period = 1.0 / cfg.spec.fsw
    if 2.0 * cfg.plant.dead_time >= period:
        raise ConfigError(
            f"{src}: [plant] dead_time = {cfg.plant.dead_time:g} s: two dead times (one at each "
            f"edge) must fit in the PWM period 1/fsw = {period:.4g} s: allowed < {period / 2:.4g} s"
        )
    if r.pwm_period_counts < MIN_PERIOD_COUNTS:
        raise ConfigError(
            f"{src}: [control] pwm_timer_clock = {cfg.control.pwm_timer_clock:g} Hz: gives "
            f"{r.pwm_period_counts} counts per PWM period; "
            "at least 100 are needed"
        )
    if r.pwm_period_counts > MAX_PERIOD_COUNTS:
        raise ConfigError(
            f"{src}: [control] pwm_timer_clock = {cfg.control.pwm_timer_clock:g} Hz: gives "
            f"{r.pwm_period_counts} counts per PWM period; "
            "at most 65535 fit the 16-bit compare"
        )


def _range_checks(r: Resolved, vpk_max: float) -> list[tuple[str, str, float, float, str, str]]:
    """(table, key, value, what it must exceed, unit, what that is) of each range rule."""
    checks = [
        ("protection", "hw_ov_level", r.hw_ov_level_V, r.ov_trip_V, "V", "[protection] ov_trip"),
        (
            "protection",
            "device_current_limit",
            r.device_current_A,
            r.oc_trip_A,
            "A",
            "[protection] oc_trip",
        ),
        ("sensing", "vac_range", r.vac_range_V, vpk_max, "V", "the highest line peak"),
        ("sensing", "il_range", r.il_range_A, r.oc_trip_A, "A", "[protection] oc_trip"),
        ("sensing", "vbus_range", r.vbus_range_V, r.ov_trip_V, "V", "[protection] ov_trip"),
    ]
    if r.line_split:  # each of L and N swings from the bus minus to the bus plus
        checks.append(
            ("sensing", "ln_range", r.ln_range_V, r.ov_trip_V, "V", "[protection] ov_trip")
        )
    return checks
