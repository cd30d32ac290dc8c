"""Load and validate a pfcrig TOML config into the typed tables of ``design.schema``.

Every error names the file, the table, the key, the value and what would have been
allowed, and raises :class:`ConfigError` before anything is written.  Checks that need the
sizing (derived thresholds and ranges) are in ``design.derive``.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .rules import DIODE_MARGIN_OF_VOUT
from .schema import (
    SCHEMA,
    TABLES,
    ControlTable,
    Key,
    PlantTable,
    ProtectionTable,
    SensingTable,
    SpecTable,
    TargetTable,
)

HOLDUP_FLOOR_OF_VOUT = 0.75  # rule: default lowest bus at the end of hold-up, as a fraction of vout
FSW_MIN_OF_LINE = 100.0  # rule: fsw at least this many times line_freq (a PWM period per 3.6 deg)


class ConfigError(ValueError):
    """A user error in a config or scenario file (the CLI exits with status 2)."""


@dataclass(frozen=True)
class Config:
    """A whole validated config: one typed frozen dataclass per table."""

    spec: SpecTable
    plant: PlantTable
    control: ControlTable
    protection: ProtectionTable
    sensing: SensingTable
    target: TargetTable
    source: str = "<config>"

    def as_dict(self) -> dict[str, dict[str, Any]]:
        return {t: dataclasses.asdict(getattr(self, t)) for t in TABLES}

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of every value (first 16 hex digits)."""
        blob = json.dumps(self.as_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(blob.encode()).hexdigest()[:16]

    def replace(self, table: str, **changes: Any) -> Config:
        """Copy with some keys of one table changed (validated again)."""
        data = {t: {k: v for k, v in d.items() if v is not None} for t, d in self.as_dict().items()}
        data[table].update(changes)
        return from_dict(data, self.source)


def where(src: str, table: str, key: str) -> str:
    """``file: [table] key``, the head of every config error."""
    return f"{src}: [{table}] {key}"


def _range_text(k: Key) -> str:
    lo = "" if k.lo is None else (f"> {k.lo:g}" if k.lo_open else f">= {k.lo:g}")
    hi = "" if k.hi is None else (f"< {k.hi:g}" if k.hi_open else f"<= {k.hi:g}")
    return " and ".join(p for p in (lo, hi) if p)


def _out_of_range(k: Key, value: float) -> bool:
    below = k.lo is not None and (value <= k.lo if k.lo_open else value < k.lo)
    above = k.hi is not None and (value >= k.hi if k.hi_open else value > k.hi)
    return below or above


def _check_string(at: str, k: Key, value: Any) -> str:
    if not isinstance(value, str):
        raise ConfigError(f"{at} = {value!r}: expected a string")
    if k.choices and value not in k.choices:
        raise ConfigError(f"{at} = {value!r}: allowed values are {', '.join(k.choices)}")
    return value


def _check_value(src: str, table: str, name: str, k: Key, value: Any) -> Any:
    at = where(src, table, name)
    if k.kind is str:
        return _check_string(at, k, value)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{at} = {value!r}: expected a number in {k.unit or 'plain units'}")
    if k.kind is int:
        if isinstance(value, float) and not value.is_integer():
            raise ConfigError(f"{at} = {value!r}: expected a whole number ({k.unit})")
        value = int(value)
    else:
        value = float(value)
        if not math.isfinite(value):
            raise ConfigError(f"{at} = {value!r}: must be a finite number")
    if _out_of_range(k, value):
        raise ConfigError(
            f"{at} = {value:g} {k.unit}: allowed range is {_range_text(k)} {k.unit}".rstrip()
        )
    return value


def _unknown(src: str, what: str, name: str, known: list[str]) -> ConfigError:
    near = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    hint = f"; did you mean '{near[0]}'?" if near else f"; known: {', '.join(known)}"
    return ConfigError(f"{src}: unknown {what} '{name}'{hint}")


# keys that were removed, with why: named in the error instead of "unknown"
REMOVED = {
    ("control", "control_delay_periods"): "the loops are tuned on the exact sampled loop of the "
    "contract's timing (mid-period sample, compare at the next period start), not on a free "
    "delay figure: remove the key",
}


def _table_values(src: str, table: str, given: dict[str, Any]) -> dict[str, Any]:
    keys = SCHEMA[table]
    for name in given:
        if (table, name) in REMOVED:
            raise ConfigError(f"{src}: [{table}] {name} was removed: {REMOVED[(table, name)]}")
        if name not in keys:
            raise _unknown(src, f"key in [{table}]", name, list(keys))
    values = {}
    for name, k in keys.items():
        if name in given:
            values[name] = _check_value(src, table, name, k, given[name])
        elif k.required:
            raise ConfigError(f"{where(src, table, name)}: missing; {k.doc} ({k.unit})")
        else:
            values[name] = k.default
    return values


def from_dict(data: dict[str, Any], source: str = "<config>") -> Config:
    """Validate a parsed TOML mapping and build a :class:`Config`."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: expected TOML tables")
    for table in data:
        if table not in SCHEMA:
            raise _unknown(source, "table", table, list(SCHEMA))
        if not isinstance(data[table], dict):
            raise ConfigError(f"{source}: '{table}' must be a table [{table}]")
    parts = {table: _table_values(source, table, data.get(table, {})) for table in SCHEMA}
    _check_spec(source, parts["spec"])
    _check_protection(source, parts["spec"], parts["protection"])
    _check_control(source, parts["spec"], parts["control"])
    _check_sensing(source, parts["sensing"])
    return Config(
        spec=SpecTable(**parts["spec"]),
        plant=PlantTable(**parts["plant"]),
        control=ControlTable(**parts["control"]),
        protection=ProtectionTable(**parts["protection"]),
        sensing=SensingTable(**parts["sensing"]),
        target=TargetTable(**parts["target"]),
        source=source,
    )


def _check_spec(src: str, s: dict[str, Any]) -> None:
    def fail(name: str, why: str) -> ConfigError:
        return ConfigError(f"{where(src, 'spec', name)} = {s[name]:g} {why}")

    if s["vin_rms_max"] < s["vin_rms_min"]:
        raise fail("vin_rms_max", f"V: must be >= vin_rms_min = {s['vin_rms_min']:g} V")
    if not s["vin_rms_min"] <= s["vin_rms_nominal"] <= s["vin_rms_max"]:
        raise fail(
            "vin_rms_nominal",
            f"V: allowed range is vin_rms_min..vin_rms_max = "
            f"{s['vin_rms_min']:g}..{s['vin_rms_max']:g} V",
        )
    vpk = math.sqrt(2.0) * s["vin_rms_max"]
    if s["vout"] <= vpk:
        raise fail(
            "vout",
            f"V: must exceed the highest input peak sqrt(2) x vin_rms_max = "
            f"{vpk:.1f} V (a boost cannot regulate below it)",
        )
    trough = s["vout"] * (1.0 - 0.5 * s["ripple_voltage_pp"])
    need = vpk + DIODE_MARGIN_OF_VOUT * s["vout"]
    if trough < need:
        raise fail(
            "vout",
            f"V: the bus trough vout x (1 - ripple_voltage_pp/2) = {trough:.1f} V must exceed "
            f"the highest input peak {vpk:.1f} V by the firmware's diode margin "
            f"({100 * DIODE_MARGIN_OF_VOUT:g} % of vout), {need:.1f} V: below it the off-time "
            "cannot bring the current down at the line's peak (a boost's bus must stay above "
            "its input) and the current there is the line rectified, not controlled",
        )
    if s["fsw"] < FSW_MIN_OF_LINE * s["line_freq"]:
        raise fail(
            "fsw",
            f"Hz: must be at least {FSW_MIN_OF_LINE:g} x line_freq = "
            f"{FSW_MIN_OF_LINE * s['line_freq']:g} Hz",
        )
    if s["vout_min_holdup"] is None:
        s["vout_min_holdup"] = round(HOLDUP_FLOOR_OF_VOUT * s["vout"], 6)
    elif s["vout_min_holdup"] >= s["vout"]:
        raise fail("vout_min_holdup", f"V: allowed range is > 0 and < vout = {s['vout']:g} V")


def _check_protection(src: str, s: dict[str, Any], pr: dict[str, Any]) -> None:
    if pr["freq_min"] >= pr["freq_max"]:
        raise ConfigError(
            f"{where(src, 'protection', 'freq_min')} = {pr['freq_min']:g} Hz: "
            f"must be < freq_max = {pr['freq_max']:g} Hz"
        )
    if not pr["freq_min"] <= s["line_freq"] <= pr["freq_max"]:
        raise ConfigError(
            f"{where(src, 'spec', 'line_freq')} = {s['line_freq']:g} Hz: outside the accepted "
            f"band [protection] freq_min..freq_max = {pr['freq_min']:g}..{pr['freq_max']:g} Hz"
        )


def _check_control(src: str, s: dict[str, Any], c: dict[str, Any]) -> None:
    prefix = c["prefix"]
    reserved = "__" in prefix or prefix.startswith("cffi")
    if not re.fullmatch(r"[a-z][a-z0-9_]{0,15}", prefix) or reserved:
        raise ConfigError(
            f"{where(src, 'control', 'prefix')} = {prefix!r}: must be a lower-case C identifier "
            "of 1..16 characters that starts with a letter, without '__' (names C reserves) "
            "and not starting with 'cffi' (the binding's own names)"
        )
    if c["current_bandwidth"] is not None and c["current_bandwidth"] > s["fsw"] / 5.0:
        raise ConfigError(
            f"{where(src, 'control', 'current_bandwidth')} = {c['current_bandwidth']:g} Hz: "
            f"allowed range is > 0 and <= fsw/5 = {s['fsw'] / 5:g} Hz"
        )
    if c["voltage_bandwidth"] >= s["line_freq"] / 2.0:
        raise ConfigError(
            f"{where(src, 'control', 'voltage_bandwidth')} = {c['voltage_bandwidth']:g} Hz: "
            f"allowed range is > 0 and < line_freq/2 = {s['line_freq'] / 2:g} Hz "
            "(the voltage loop must stay well below twice line frequency)"
        )


def _check_sensing(src: str, se: dict[str, Any]) -> None:
    full = 2 ** se["adc_bits"] - 1
    unused = ("vac_range", "vac_offset") if se["line"] == "split" else ("ln_range",)
    for name in unused:
        if se[name] is not None:
            raise ConfigError(
                f"{where(src, 'sensing', name)}: not used with line = '{se['line']}' "
                f"({'bipolar' if name.startswith('vac') else 'split'} line sensing only); "
                "remove it or change [sensing] line"
            )
    for name in ("vac_offset", "il_offset"):
        if se[name] is not None and se[name] > full:
            raise ConfigError(
                f"{where(src, 'sensing', name)} = {se[name]:g} counts: allowed "
                f"range is 0..{full} for {se['adc_bits']} bits"
            )


MAX_FILE_B = 1 << 20  # a config or scenario file is at most 1 MiB


def read_toml(path: str | Path) -> dict[str, Any]:
    """A TOML file's tables; any problem reading or parsing it is a ConfigError naming it."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_FILE_B + 1)
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read ({exc.strerror})") from None
    if len(raw) > MAX_FILE_B:
        raise ConfigError(f"{path}: larger than {MAX_FILE_B >> 10} KiB: not a pfcrig file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    except RecursionError:
        raise ConfigError(f"{path}: nested too deeply to be a pfcrig file") from None


def load(path: str | Path) -> Config:
    """Read and validate a TOML config file."""
    return from_dict(read_toml(path), str(Path(path)))
