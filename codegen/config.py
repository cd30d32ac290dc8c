"""Load and validate a pfcrig TOML config into frozen dataclasses.

Units are SI throughout (V, A, W, Hz, H, F, s, ohm); fractions are plain
numbers (0.2 = 20 %).  Every error names the file, the table, the key, the
value and what would have been allowed, and raises :class:`ConfigError`
before anything is written.

Values that depend on the power-stage sizing (inductance, capacitance,
sensor ranges, protection thresholds) may be left out; they are ``None`` here
and are filled in by ``harness.project`` from ``plant.sizing``.
"""
from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


class ConfigError(ValueError):
    """A user error in a config or scenario file (the CLI exits with status 2)."""


@dataclass(frozen=True)
class Key:
    """Schema of one config key.

    ``lo``/``hi`` bound the value; ``lo_open``/``hi_open`` make that bound
    exclusive.  ``choices`` restricts strings.  ``default`` of ``None`` with
    ``required=False`` means "derived from sizing".
    """

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


POS = dict(lo=0.0, lo_open=True)  # strictly positive
NONNEG = dict(lo=0.0)

SCHEMA: dict[str, dict[str, Key]] = {
    "spec": {
        "vin_rms_min": Key(float, "V", "lowest line voltage at full power (rms)", required=True, **POS),
        "vin_rms_max": Key(float, "V", "highest line voltage (rms)", required=True, **POS),
        "vin_rms_nominal": Key(float, "V", "nominal line voltage (rms)", required=True, **POS),
        "line_freq": Key(float, "Hz", "nominal line frequency", required=True, lo=45.0, hi=66.0),
        "vout": Key(float, "V", "regulated bus voltage", required=True, **POS),
        "power": Key(float, "W", "rated output power delivered to the bus", required=True, **POS),
        "efficiency": Key(float, "1", "expected efficiency at full power", default=0.96, lo=0.0, lo_open=True, hi=1.0),
        "fsw": Key(float, "Hz", "switching frequency of the fast leg", required=True, **POS),
        "ripple_current": Key(float, "1", "inductor ripple pk-pk as a fraction of the peak line current at vin_rms_min, full power", default=0.3, lo=0.0, lo_open=True, hi=2.0),
        "ripple_voltage_pp": Key(float, "1", "bus ripple pk-pk at twice line frequency as a fraction of vout", default=0.05, lo=0.0, lo_open=True, hi=0.5),
        "holdup_time": Key(float, "s", "time the bus must carry full power after the line is lost", default=0.0, lo=0.0, hi=1.0),
        "vout_min_holdup": Key(float, "V", "lowest bus voltage at the end of hold-up", default=None, **POS),
    },
    "plant": {
        "inductance": Key(float, "H", "boost inductance (default: from sizing)", **POS),
        "capacitance": Key(float, "F", "bus capacitance (default: from sizing)", **POS),
        "inductor_dcr": Key(float, "ohm", "inductor winding resistance", default=0.03, **NONNEG),
        "capacitor_esr": Key(float, "ohm", "bus capacitor equivalent series resistance", default=0.05, **NONNEG),
        "rds_on_fast": Key(float, "ohm", "on-resistance of each fast-leg switch", default=0.04, **NONNEG),
        "rds_on_slow": Key(float, "ohm", "on-resistance of each slow-leg switch (or diode slope resistance)", default=0.02, **NONNEG),
        "dead_time": Key(float, "s", "dead time the timer inserts at each fast-leg edge", default=100e-9, **NONNEG),
        "slow_leg": Key(str, "", "slow-leg devices", default="mosfet", choices=("mosfet", "diode")),
        "source_resistance": Key(float, "ohm", "grid source resistance", default=0.05, **NONNEG),
        "source_inductance": Key(float, "H", "grid source inductance", default=20e-6, **NONNEG),
        "inrush_resistance": Key(float, "ohm", "inrush limiter in series with the line, bypassed by a relay once the bus is charged (0: none)", default=10.0, **NONNEG),
    },
    "control": {
        "number_format": Key(str, "", "number format of the generated C", default="float32", choices=("float32", "q15")),
        "prefix": Key(str, "", "C symbol prefix", default="pfc"),
        "current_bandwidth": Key(float, "Hz", "current-loop crossover (default fsw/15)", **POS),
        "current_phase_margin_deg": Key(float, "deg", "current-loop phase margin", default=45.0, lo=20.0, hi=85.0),
        "voltage_bandwidth": Key(float, "Hz", "voltage-loop crossover", default=10.0, **POS),
        "voltage_phase_margin_deg": Key(float, "deg", "voltage-loop phase margin", default=45.0, lo=20.0, hi=85.0),
        "control_delay_periods": Key(float, "periods", "sample-to-effect delay used for tuning (computation plus PWM hold)", default=1.5, lo=0.0, hi=4.0),
        "soft_start_time": Key(float, "s", "bus reference ramp from the precharged value to vout", default=0.1, **POS),
        "zc_hysteresis": Key(float, "V", "polarity comparator hysteresis half-band (default 4 % of the lowest line peak)", **POS),
        "zc_debounce_periods": Key(int, "periods", "consecutive samples beyond the band before the polarity changes", default=2, lo=1, hi=64),
        "zc_blank_voltage": Key(float, "V", "|v| below which neither leg switches (default 8 % of the lowest line peak)", **POS),
        "zc_ramp_periods": Key(int, "periods", "periods over which the main switch's duty ramps in after a zero crossing", default=16, lo=0, hi=1000),
        "sync_delay_periods": Key(int, "periods", "periods after the ramp before the synchronous switch is enabled", default=4, lo=0, hi=1000),
        "duty_max": Key(float, "1", "largest main-switch duty", default=0.98, lo=0.5, hi=1.0, hi_open=True),
        "pwm_timer_clock": Key(float, "Hz", "PWM timer count frequency", default=120e6, **POS),
    },
    "protection": {
        "ov_trip": Key(float, "V", "bus over-voltage trip (default 1.1 vout)", **POS),
        "oc_trip": Key(float, "A", "inductor over-current trip (default 1.5 x sized peak)", **POS),
        "brownout_off_rms": Key(float, "V", "line rms below which the stage stops (default 0.85 vin_rms_min)", **POS),
        "brownout_on_rms": Key(float, "V", "line rms above which the stage may start (default 0.92 vin_rms_min)", **POS),
        "line_loss_time": Key(float, "s", "time with |v| under the blanking voltage that counts as line loss", default=3e-3, **POS),
        "freq_min": Key(float, "Hz", "lowest accepted line frequency", default=45.0, lo=40.0, hi=70.0),
        "freq_max": Key(float, "Hz", "highest accepted line frequency", default=66.0, lo=40.0, hi=70.0),
        "retry_limit": Key(int, "trips", "over-voltage/over-current trips before the fault latches", default=3, lo=1, hi=100),
        "retry_delay": Key(float, "s", "wait after a trip before restarting", default=0.02, **POS),
    },
    "sensing": {
        "adc_bits": Key(int, "bit", "ADC resolution", default=12, lo=8, hi=16),
        "vac_range": Key(float, "V", "line voltage at the top of the bipolar ADC range (default 1.25 x highest line peak)", **POS),
        "il_range": Key(float, "A", "inductor current at the top of the bipolar ADC range (default 1.25 x over-current trip)", **POS),
        "vbus_range": Key(float, "V", "bus voltage at ADC full scale (default 1.25 x over-voltage trip)", **POS),
        "vac_offset": Key(float, "counts", "ADC count for 0 V line (default mid-scale)", **NONNEG),
        "il_offset": Key(float, "counts", "ADC count for 0 A (default mid-scale)", **NONNEG),
        "rail_periods": Key(int, "periods", "consecutive samples at a rail before a sensor fault", default=4, lo=1, hi=1000),
    },
}


def _mk_dataclass(table: str) -> type:
    fields = []
    for name, key in SCHEMA[table].items():
        ann = {float: "float | None", int: "int | None", str: "str | None"}[key.kind]
        fields.append((name, ann, field(default=None, metadata={"unit": key.unit, "doc": key.doc})))
    cls = dataclasses.make_dataclass(table.capitalize(), fields, frozen=True)
    cls.__module__ = __name__  # picklable (worker processes receive configs)
    return cls


Spec = _mk_dataclass("spec")
Plant = _mk_dataclass("plant")
Control = _mk_dataclass("control")
Protection = _mk_dataclass("protection")
Sensing = _mk_dataclass("sensing")
_TABLE_TYPES = {"spec": Spec, "plant": Plant, "control": Control, "protection": Protection, "sensing": Sensing}


@dataclass(frozen=True)
class Config:
    """A whole validated config: one frozen dataclass per table."""

    spec: Any
    plant: Any
    control: Any
    protection: Any
    sensing: Any
    source: str = "<config>"

    def as_dict(self) -> dict[str, dict[str, Any]]:
        return {t: dataclasses.asdict(getattr(self, t)) for t in _TABLE_TYPES}

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of every value (first 16 hex digits)."""
        blob = json.dumps(self.as_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(blob.encode()).hexdigest()[:16]

    def replace(self, table: str, **changes: Any) -> "Config":
        """Copy with some keys of one table changed (validated again)."""
        data = {t: {k: v for k, v in d.items() if v is not None} for t, d in self.as_dict().items()}
        data[table].update(changes)
        return from_dict(data, self.source)


def _where(src: str, table: str, key: str) -> str:
    return f"{src}: [{table}] {key}"


def _range_text(k: Key) -> str:
    lo = "" if k.lo is None else (f"> {k.lo:g}" if k.lo_open else f">= {k.lo:g}")
    hi = "" if k.hi is None else (f"< {k.hi:g}" if k.hi_open else f"<= {k.hi:g}")
    return " and ".join(p for p in (lo, hi) if p)


def _check_value(src: str, table: str, name: str, k: Key, value: Any) -> Any:
    where = _where(src, table, name)
    if k.kind is str:
        if not isinstance(value, str):
            raise ConfigError(f"{where} = {value!r}: expected a string")
        if k.choices and value not in k.choices:
            raise ConfigError(f"{where} = {value!r}: allowed values are {', '.join(k.choices)}")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{where} = {value!r}: expected a number in {k.unit or 'plain units'}")
    if k.kind is int:
        if isinstance(value, float) and not value.is_integer():
            raise ConfigError(f"{where} = {value!r}: expected a whole number ({k.unit})")
        value = int(value)
    else:
        value = float(value)
        if not math.isfinite(value):
            raise ConfigError(f"{where} = {value!r}: must be a finite number")
    bad = (k.lo is not None and (value <= k.lo if k.lo_open else value < k.lo)) or (
        k.hi is not None and (value >= k.hi if k.hi_open else value > k.hi)
    )
    if bad:
        raise ConfigError(f"{where} = {value:g} {k.unit}: allowed range is {_range_text(k)} {k.unit}".rstrip())
    return value


def _unknown(src: str, where: str, name: str, known: list[str]) -> ConfigError:
    near = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    hint = f"; did you mean '{near[0]}'?" if near else f"; known: {', '.join(known)}"
    return ConfigError(f"{src}: unknown {where} '{name}'{hint}")


def from_dict(data: dict[str, Any], source: str = "<config>") -> Config:
    """Validate a parsed TOML mapping and build a :class:`Config`."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: expected TOML tables")
    for table in data:
        if table not in SCHEMA:
            raise _unknown(source, "table", table, list(SCHEMA))
        if not isinstance(data[table], dict):
            raise ConfigError(f"{source}: '{table}' must be a table [{table}]")
    parts: dict[str, Any] = {}
    for table, keys in SCHEMA.items():
        given = data.get(table, {})
        for name in given:
            if name not in keys:
                raise _unknown(source, f"key in [{table}]", name, list(keys))
        values = {}
        for name, k in keys.items():
            if name in given:
                values[name] = _check_value(source, table, name, k, given[name])
            elif k.required:
                raise ConfigError(f"{_where(source, table, name)}: missing; {k.doc} ({k.unit})")
            else:
                values[name] = k.default
        parts[table] = values
    _cross_checks(source, parts)
    return Config(**{t: _TABLE_TYPES[t](**parts[t]) for t in SCHEMA}, source=source)


def _cross_checks(src: str, p: dict[str, dict[str, Any]]) -> None:
    s = p["spec"]
    if s["vin_rms_max"] < s["vin_rms_min"]:
        raise ConfigError(
            f"{_where(src, 'spec', 'vin_rms_max')} = {s['vin_rms_max']:g} V: must be >= vin_rms_min = {s['vin_rms_min']:g} V"
        )
    if not s["vin_rms_min"] <= s["vin_rms_nominal"] <= s["vin_rms_max"]:
        raise ConfigError(
            f"{_where(src, 'spec', 'vin_rms_nominal')} = {s['vin_rms_nominal']:g} V: allowed range is "
            f"vin_rms_min..vin_rms_max = {s['vin_rms_min']:g}..{s['vin_rms_max']:g} V"
        )
    vpk = math.sqrt(2.0) * s["vin_rms_max"]
    if s["vout"] <= vpk:
        raise ConfigError(
            f"{_where(src, 'spec', 'vout')} = {s['vout']:g} V: must exceed the highest input peak "
            f"sqrt(2) x vin_rms_max = {vpk:.1f} V (a boost cannot regulate below it)"
        )
    if s["fsw"] < 100.0 * s["line_freq"]:
        raise ConfigError(
            f"{_where(src, 'spec', 'fsw')} = {s['fsw']:g} Hz: must be at least 100 x line_freq = {100 * s['line_freq']:g} Hz"
        )
    if s["vout_min_holdup"] is None:
        s["vout_min_holdup"] = round(0.75 * s["vout"], 6)
    elif s["vout_min_holdup"] >= s["vout"]:
        raise ConfigError(
            f"{_where(src, 'spec', 'vout_min_holdup')} = {s['vout_min_holdup']:g} V: allowed range is > 0 and < vout = {s['vout']:g} V"
        )
    pr = p["protection"]
    if pr["freq_min"] >= pr["freq_max"]:
        raise ConfigError(f"{_where(src, 'protection', 'freq_min')} = {pr['freq_min']:g} Hz: must be < freq_max = {pr['freq_max']:g} Hz")
    if not pr["freq_min"] <= s["line_freq"] <= pr["freq_max"]:
        raise ConfigError(
            f"{_where(src, 'spec', 'line_freq')} = {s['line_freq']:g} Hz: outside the accepted band "
            f"[protection] freq_min..freq_max = {pr['freq_min']:g}..{pr['freq_max']:g} Hz"
        )
    if pr["ov_trip"] is not None and pr["ov_trip"] <= s["vout"]:
        raise ConfigError(f"{_where(src, 'protection', 'ov_trip')} = {pr['ov_trip']:g} V: must be > vout = {s['vout']:g} V")
    on, off = pr["brownout_on_rms"], pr["brownout_off_rms"]
    if on is not None and off is not None and on <= off:
        raise ConfigError(
            f"{_where(src, 'protection', 'brownout_on_rms')} = {on:g} V: must be > brownout_off_rms = {off:g} V (hysteresis)"
        )
    c = p["control"]
    if not c["prefix"].isidentifier() or not c["prefix"].isascii() or c["prefix"] != c["prefix"].lower():
        raise ConfigError(f"{_where(src, 'control', 'prefix')} = {c['prefix']!r}: must be a lower-case ASCII C identifier")
    if c["current_bandwidth"] is not None and c["current_bandwidth"] > s["fsw"] / 5.0:
        raise ConfigError(
            f"{_where(src, 'control', 'current_bandwidth')} = {c['current_bandwidth']:g} Hz: allowed range is > 0 and <= fsw/5 = {s['fsw'] / 5:g} Hz"
        )
    if c["voltage_bandwidth"] >= s["line_freq"] / 2.0:
        raise ConfigError(
            f"{_where(src, 'control', 'voltage_bandwidth')} = {c['voltage_bandwidth']:g} Hz: allowed range is > 0 and < line_freq/2 = {s['line_freq'] / 2:g} Hz "
            "(the voltage loop must stay well below twice line frequency)"
        )
    se = p["sensing"]
    full = 2 ** se["adc_bits"] - 1
    for off_key in ("vac_offset", "il_offset"):
        if se[off_key] is not None and se[off_key] > full:
            raise ConfigError(f"{_where(src, 'sensing', off_key)} = {se[off_key]:g} counts: allowed range is 0..{full} for {se['adc_bits']} bits")


def load(path: str | Path) -> Config:
    """Read and validate a TOML config file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read ({exc.strerror})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    return from_dict(data, str(path))
