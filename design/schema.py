"""The config's tables as typed frozen dataclasses: every key with its type, unit, doc,
default and allowed range, written once (the loader, ``pfcrig init`` and the docs read it).

Units are SI (V, A, W, Hz, H, F, s, ohm); fractions are plain numbers (0.2 = 20 %).  The ranges
of the ratings are the tool's scope: single-phase lines of 40..300 V rms, buses of 100..1000 V,
10 W..100 kW, switching at 5 kHz..1 MHz.  A key
whose default is ``None`` (and that is not required) is derived from the sizing by
``design.derive``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

from .contract import CARRIERS


@dataclass(frozen=True)
class Key:
    """Schema of one config key: ``lo``/``hi`` bound the value (``*_open``: exclusive),
    ``choices`` restrict strings, ``kind`` is the Python type of a given value."""

    kind: type
    unit: str
    doc: str
    default: Any = None
    required: bool = False
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    choices: tuple[str, ...] = ()


_KINDS = {"float": float, "int": int, "str": str}


def key(
    unit: str,
    doc: str,
    default: Any = None,
    *,
    required: bool = False,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    choices: tuple[str, ...] = (),
) -> Any:
    """A dataclass field carrying its :class:`Key` (the kind is read from the annotation)."""
    meta = dict(
        unit=unit,
        doc=doc,
        default=default,
        required=required,
        lo=lo,
        hi=hi,
        lo_open=lo_open,
        hi_open=hi_open,
        choices=choices,
    )
    if required:
        return field(metadata={"key": meta})
    return field(default=default, metadata={"key": meta})


def pos(unit: str, doc: str, default: Any = None, **kw: Any) -> Any:
    """A strictly positive number."""
    return key(unit, doc, default, lo=0.0, lo_open=True, **kw)


def nonneg(unit: str, doc: str, default: Any = None, **kw: Any) -> Any:
    """A number >= 0."""
    return key(unit, doc, default, lo=0.0, **kw)


def fraction(doc: str, default: float, hi: float = 1.0) -> Any:
    """A fraction in (0, hi]."""
    return key("1", doc, default, lo=0.0, lo_open=True, hi=hi)


def keys_of(cls: type) -> dict[str, Key]:
    """{name: Key} of one table class, in declaration order."""
    out = {}
    for f in dataclasses.fields(cls):
        meta = dict(f.metadata["key"])
        kind = _KINDS[str(f.type).split("|")[0].strip()]
        out[f.name] = Key(kind=kind, **meta)
    return out


@dataclass(frozen=True, kw_only=True)
class SpecTable:
    """``[spec]``: the ratings of the stage."""

    vin_rms_min: float = key(
        "V", "lowest line voltage at full power (rms)", required=True, lo=40.0, hi=300.0
    )
    vin_rms_max: float = key("V", "highest line voltage (rms)", required=True, lo=40.0, hi=300.0)
    vin_rms_nominal: float = key(
        "V", "nominal line voltage (rms)", required=True, lo=40.0, hi=300.0
    )
    line_freq: float = key("Hz", "nominal line frequency", required=True, lo=45.0, hi=66.0)
    vout: float = key("V", "regulated bus voltage", required=True, lo=100.0, hi=1000.0)
    power: float = key(
        "W", "rated output power delivered to the bus", required=True, lo=10.0, hi=100e3
    )
    efficiency: float = fraction("expected efficiency at full power", 0.96)
    fsw: float = key("Hz", "switching frequency of the fast leg", required=True, lo=5e3, hi=1e6)
    ripple_current: float = fraction(
        "inductor ripple pk-pk as a fraction of the peak line current at vin_rms_min, full power",
        0.3,
        hi=2.0,
    )
    ripple_voltage_pp: float = fraction(
        "bus ripple pk-pk at twice line frequency as a fraction of vout", 0.05, hi=0.5
    )
    holdup_time: float = key(
        "s", "time the bus must carry full power after the line is lost", 0.0, lo=0.0, hi=1.0
    )
    vout_min_holdup: float = pos(
        "V", "lowest bus voltage at the end of hold-up (default 0.75 vout)", None, hi=1000.0
    )


@dataclass(frozen=True, kw_only=True)
class PlantTable:
    """``[plant]``: power-stage parts the simulation uses (and the sizing may override)."""

    inductance: float | None = pos("H", "boost inductance (default: from sizing)", hi=1.0)
    capacitance: float | None = pos("F", "bus capacitance (default: from sizing)", hi=1.0)
    inductor_dcr: float = nonneg("ohm", "inductor winding resistance", 0.03, hi=10.0)
    capacitor_esr: float = nonneg(
        "ohm", "bus capacitor equivalent series resistance", 0.05, hi=10.0
    )
    rds_on_fast: float = nonneg("ohm", "on-resistance of each fast-leg switch", 0.04, hi=10.0)
    rds_on_slow: float = nonneg(
        "ohm", "on-resistance of each slow-leg switch (or diode slope resistance)", 0.02, hi=10.0
    )
    dead_time: float = nonneg(
        "s", "dead time the timer inserts at each fast-leg edge", 100e-9, hi=10e-6
    )
    slow_leg: str = key("", "slow-leg devices", "mosfet", choices=("mosfet", "diode"))
    source_resistance: float = nonneg("ohm", "grid source resistance", 0.05, hi=10.0)
    source_inductance: float = nonneg("H", "grid source inductance", 20e-6, hi=0.01)
    inrush_resistance: float = nonneg(
        "ohm",
        "inrush limiter in series with the line, bypassed by a relay once the bus is "
        "charged (0: none)",
        10.0,
        hi=1000.0,
    )
    relay_delay: float = pos(
        "s",
        "contact time of the inrush limiter's bypass relay: it follows the firmware's command "
        "this long after (the firmware waits 1.5 x this before switching)",
        0.01,
        hi=1.0,
    )
    node_capacitance: float | None = nonneg(
        "F",
        "energy-equivalent capacitance of the fast leg's switch node, both devices (default "
        "8e-12 ohm F / rds_on_fast: a 650 V wide-bandgap class whose output capacitance "
        "scales inversely with on-resistance; illustrative)",
        hi=1e-6,
    )
    slow_node_capacitance: float | None = nonneg(
        "F",
        "charge-equivalent capacitance of the slow leg's midpoint to the bus rails, both "
        "devices: while neither slow device conducts, the line current must move this charge "
        "before the other one can take it (default: mosfet 1.5e-10 ohm F / rds_on_slow, a "
        "650 V superjunction class whose time-related output capacitance scales inversely "
        "with on-resistance; diode 100 pF, two line-frequency rectifiers' junctions; "
        "illustrative)",
        hi=1e-6,
    )
    slow_diode_qrr: float = nonneg(
        "C",
        "reverse-recovery charge of a slow-leg diode whose current the loop reverses while "
        'it conducts (slow_leg = "diode"; 2e-7: a fast-recovery rectifier class at a few A '
        "and tens of A/us, illustrative); a diode whose current has rested at zero for a "
        "sub-interval is taken as recovered",
        2e-7,
        hi=1e-4,
    )
    transition_time: float = nonneg(
        "s", "voltage-current overlap of a hard transition (illustrative)", 10e-9, hi=1e-6
    )
    fast_qrr: float = nonneg(
        "C",
        "reverse-recovery charge of a fast-leg switch's body diode, swept at the other switch's "
        "hard turn-on after the dead time: E = Q_rr v_bus (0: none, a GaN class; a 650 V SiC "
        "MOSFET class of 40 mohm has some 50 to 100 nC; from memory, illustrative)",
        0.0,
        hi=1e-5,
    )
    reverse_drop: float = nonneg(
        "V",
        "fast leg's reverse conduction drop while neither switch is on: body diode or third "
        "quadrant (3 V: a SiC MOSFET class; illustrative)",
        3.0,
        hi=20.0,
    )
    core_k: float = nonneg(
        "W/m^3",
        "Steinmetz coefficient k of P_v = k f^alpha B^beta, f in Hz, B in T (default: a MnZn "
        "power ferrite class near 100 C, about 100 kW/m^3 at 100 kHz and 100 mT; from memory, "
        "illustrative)",
        3.2,
        hi=1e6,
    )
    core_alpha: float = key("1", "Steinmetz frequency exponent", 1.4, lo=1.0, hi=3.0)
    core_beta: float = key("1", "Steinmetz flux exponent", 2.5, lo=1.0, hi=4.0)
    core_peak_flux: float = pos(
        "T", "core flux density at the sized peak inductor current", 0.3, hi=2.0
    )
    core_volume: float | None = nonneg(
        "m^3",
        "core volume (default: a gapped core storing L I_peak^2 / 2 at core_peak_flux with "
        "an effective permeability of 60, mu_e mu_0 L I_peak^2 / B^2; illustrative)",
        hi=1.0,
    )
    inductor_ac_factor: float = key(
        "1",
        "winding's resistance to the switching ripple over its DC resistance (illustrative)",
        2.0,
        lo=1.0,
        hi=100.0,
    )
    x_capacitance: float | None = nonneg(
        "F",
        "input filter's X capacitance across the stage's input, after the DM inductor; it "
        "carries the inductor's ripple and its voltage is the sensed line (default 1 uF per "
        "kW of rated power, typical, illustrative; 0: no filter, the grid's impedance then in "
        "series with the boost inductor)",
        hi=1e-3,
    )
    dm_inductance: float = pos(
        "H", "input filter's differential-mode inductance (illustrative)", 10e-6, hi=0.01
    )
    dm_resistance: float = nonneg(
        "ohm", "the DM inductor's winding resistance (illustrative)", 0.01, hi=10.0
    )
    dm_damping: float | None = pos(
        "ohm",
        "damping resistor across the DM inductor (default sqrt(dm_inductance / x_capacitance), "
        "the filter's characteristic impedance: common practice)",
        hi=1e6,
    )


@dataclass(frozen=True, kw_only=True)
class ControlTable:
    """``[control]``: loop targets, the zero-crossing handling and the generated C's form."""

    number_format: str = key(
        "", "number format of the generated C", "float32", choices=("float32", "q15")
    )
    prefix: str = key("", "C symbol prefix (lower-case C identifier)", "pfc")
    current_bandwidth: float | None = pos(
        "Hz",
        "current-loop crossover (default fsw/15; fsw/25 with the edge-aligned carrier)",
        hi=1e6,
    )
    ff_corner: float | None = pos(
        "Hz",
        "corner of the first-order low-pass on |v| in the duty feedforward 1 - |v|/v_bus "
        "(default fsw/10 with an input filter, none without: above the current loop's "
        "crossover, below the filter's resonance)",
        hi=1e7,
    )
    current_phase_margin_deg: float = key(
        "deg",
        "current-loop phase margin on the sampled loop (57: the margin the fault campaigns "
        "prove the firmware at)",
        57.0,
        lo=20.0,
        hi=85.0,
    )
    voltage_bandwidth: float = pos("Hz", "voltage-loop crossover", 10.0, hi=100.0)
    voltage_phase_margin_deg: float = key(
        "deg", "voltage-loop phase margin", 45.0, lo=20.0, hi=85.0
    )
    soft_start_time: float | None = pos(
        "s",
        "bus reference ramp from the precharged value to vout (default: the capacitor's "
        "charging power C x vout^2/time at most half the rated power, and at least 0.1 s)",
        hi=10.0,
    )
    zc_hysteresis: float | None = pos(
        "V",
        "polarity comparator hysteresis half-band (default 4 % of the lowest line peak)",
        hi=100.0,
    )
    zc_debounce_periods: int | None = key(
        "periods",
        "consecutive samples beyond the band before the polarity changes (default 2, or with an "
        "input filter one more than half its resonance period, which its ring cannot outlast)",
        None,
        lo=1,
        hi=64,
    )
    zc_blank_voltage: float | None = pos(
        "V", "|v| below which neither leg switches (default 8 % of the lowest line peak)", hi=200.0
    )
    zc_ramp_periods: int = key(
        "periods",
        "periods over which the main switch's duty ramps in after a zero crossing",
        16,
        lo=0,
        hi=1000,
    )
    sync_delay_periods: int = key(
        "periods",
        "periods after the ramp before the synchronous switch is enabled",
        4,
        lo=0,
        hi=1000,
    )
    x_cap_compensation: str = key(
        "",
        "lower the current reference by the input filter's X-capacitor current, C_x dv/dt, so "
        "that the line's current follows its voltage at light load and high line (common "
        "practice; needs an input filter)",
        "off",
        choices=("off", "on"),
    )
    carrier: str = key(
        "",
        "PWM carrier and ADC instant: 'centre' (up-down counter, the fast leg's low switch on "
        "d T/2 at each end of the period, the ADC at the counter's top) or 'edge' (up counter, "
        "the low switch on for d T from the period start, the ADC at half that on-time from a "
        "second compare); compare and gates take effect at the period start in both, and the "
        "current loop is tuned on the chosen timing's sampled plant",
        "centre",
        choices=CARRIERS,
    )
    duty_max: float = key("1", "largest main-switch duty", 0.98, lo=0.5, hi=1.0, hi_open=True)
    pwm_timer_clock: float = pos("Hz", "PWM timer count frequency", 120e6, hi=1e10)


@dataclass(frozen=True, kw_only=True)
class ProtectionTable:
    """``[protection]``: trips, brown-out and line-loss rules, retries."""

    ov_trip: float | None = pos("V", "bus over-voltage trip (default 1.1 vout)", hi=2000.0)
    oc_trip: float | None = pos(
        "A", "inductor over-current trip (default 1.5 x sized peak)", hi=10000.0
    )
    brownout_off_rms: float | None = pos(
        "V", "line rms below which the stage stops (default 0.85 vin_rms_min)", hi=300.0
    )
    brownout_on_rms: float | None = pos(
        "V", "line rms above which the stage may start (default 0.92 vin_rms_min)", hi=300.0
    )
    line_loss_time: float = pos(
        "s", "time with |v| under the blanking voltage that counts as line loss", 3e-3, hi=1.0
    )
    freq_min: float = key("Hz", "lowest accepted line frequency", 45.0, lo=40.0, hi=70.0)
    freq_max: float = key("Hz", "highest accepted line frequency", 66.0, lo=40.0, hi=70.0)
    retry_limit: int = key(
        "trips", "over-voltage/over-current trips before the fault latches", 3, lo=1, hi=100
    )
    retry_delay: float = pos("s", "wait after a trip before restarting", 0.02, hi=10.0)
    hw_ov_level: float | None = pos(
        "V",
        "bus level of the hardware over-voltage comparator the board must provide, independent "
        "of the controller's ADC (default 1.15 vout); the fault campaign's bound on the real bus",
        hi=2000.0,
    )
    device_current_limit: float | None = pos(
        "A",
        "peak current the power switches and the inductor withstand (default 2 x oc_trip, "
        "illustrative: take the device's pulsed rating); the fault campaign's bound",
        hi=100000.0,
    )


@dataclass(frozen=True, kw_only=True)
class SensingTable:
    """``[sensing]``: the ADC and the sensor front ends' full-scale ranges and offsets."""

    adc_bits: int = key("bit", "ADC resolution", 12, lo=8, hi=16)
    line: str = key(
        "",
        "line-voltage sensing: 'bipolar' (one channel across L and N, 0 V at mid-scale) or "
        "'split' (L and N each to the bus minus on its own unipolar channel, like the bus's; "
        "the line is their difference)",
        "bipolar",
        choices=("bipolar", "split"),
    )
    ln_range: float | None = pos(
        "V",
        "split sensing: L or N voltage to the bus minus at ADC full scale (default the bus "
        "channel's range: each node swings from the bus minus to the bus plus)",
        hi=10000.0,
    )
    vac_range: float | None = pos(
        "V",
        "line voltage at the top of the bipolar ADC range (default 1.25 x the highest voltage "
        "the stage's input can show: with an input filter, where its X capacitor rings when "
        "the line steps from 0 to its highest peak (an IEC 61000-4-11 interruption ending at "
        "the peak), at most the over-voltage trip; without one, that peak plus L_s/(L_s + L) "
        "of the way up to the over-voltage trip, where a rectified surge puts it)",
        hi=10000.0,
    )
    il_range: float | None = pos(
        "A",
        "inductor current at the top of the bipolar ADC range (default 1.25 x over-current trip)",
        hi=100000.0,
    )
    vbus_range: float | None = pos(
        "V", "bus voltage at ADC full scale (default 1.25 x over-voltage trip)", hi=10000.0
    )
    vac_offset: float | None = nonneg(
        "counts", "ADC count for 0 V line (default mid-scale)", hi=65535.0
    )
    il_offset: float | None = nonneg("counts", "ADC count for 0 A (default mid-scale)", hi=65535.0)
    rail_periods: int = key(
        "periods", "consecutive samples at a rail before a sensor fault", 4, lo=1, hi=1000
    )


@dataclass(frozen=True, kw_only=True)
class TargetTable:
    """``[target]``: the microcontroller the firmware runs on (for the interrupt's budget)."""

    core_clock_hz: float = pos(
        "Hz",
        "core clock of the MCU (illustrative default; the instruction count measured on the "
        "emulated core is a lower bound on cycles: flash wait states, bus stalls and multi-cycle "
        "instructions add to it)",
        120e6,
        hi=2e9,
    )


TABLES: dict[str, type] = {
    "spec": SpecTable,
    "plant": PlantTable,
    "control": ControlTable,
    "protection": ProtectionTable,
    "sensing": SensingTable,
    "target": TargetTable,
}
SCHEMA: dict[str, dict[str, Key]] = {name: keys_of(cls) for name, cls in TABLES.items()}
