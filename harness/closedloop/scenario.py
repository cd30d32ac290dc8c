"""Scenario files (TOML): grid, load, sensor errors and timed events.

```
duration = 0.6                 # s
[grid]
vrms = 230.0                   # V
freq = 50.0                    # Hz
phase_deg = 0.0                # phase at t = 0
harmonics = [[3, 0.02, 0.0]]   # optional: [order, fraction of fundamental, phase deg]
dc = 0.0                       # V, optional
[load]
kind = "resistive"             # or "constant_power"
power = 1500.0                 # W
[sensors]                      # optional, per channel [line, current, bus]
                               # ([L, current, bus, N] with split line sensing)
noise_counts = [0.0, 0.0, 0.0]
gain_error = [0.0, 0.0, 0.0]
offset_counts = [0.0, 0.0, 0.0]
seed = 0
[[event]]
t = 0.4                        # s
kind = "dip"                   # dip: residual (fraction), cycles; load: power (W);
residual = 0.0                 # freq: hz; phase_jump: deg; vrms: vrms (V)
cycles = 1.0
[[event]]                      # a failed sensor (plant.sensor_faults)
t = 0.3
kind = "sensor"
channel = "vbus"               # vac, il or vbus (vl, il, vbus or vn with split line sensing)
fault = "stuck"                # stuck, offset (value_counts); gain (value);
value_counts = 0               # glitch (value_counts, periods); open
duration = 0.1                 # s, optional: for good without it
```
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from design.config import ConfigError, read_toml
from plant.sensor_faults import CHANNELS, CHANNELS_SPLIT, FAULTS

EVENT_KEYS = {
    "dip": {"residual": (0.0, 1.0), "cycles": (0.0, 10000.0)},
    "load": {"power": (0.0, 1e7)},
    "freq": {"hz": (1.0, 1000.0)},
    "phase_jump": {"deg": (-360.0, 360.0)},
    "vrms": {"vrms": (0.0, 1000.0)},
    "sensor": {},  # channel, fault and the fault's own keys: SENSOR_KEYS
}
# the numbers each sensor fault takes (besides the optional duration, s)
SENSOR_KEYS = {
    "stuck": {"value_counts": (0.0, 65535.0)},
    "offset": {"value_counts": (-65535.0, 65535.0)},
    "gain": {"value": (-10.0, 10.0)},
    "glitch": {"value_counts": (0.0, 65535.0), "periods": (1.0, 1e6)},
    "open": {},
}


@dataclass(frozen=True)
class Event:
    t_s: float
    kind: str
    values: tuple[tuple[str, float], ...]
    words: tuple[tuple[str, str], ...] = ()  # a sensor event's channel and fault

    def get(self, key: str, default: float | None = None) -> float:
        v = dict(self.values).get(key, default)
        if v is None:
            raise KeyError(key)
        return v

    def word(self, key: str) -> str:
        return dict(self.words)[key]


@dataclass(frozen=True)
class Scenario:
    duration_s: float
    vrms_V: float
    freq_Hz: float
    phase_deg: float = 0.0
    load_kind: str = "resistive"
    load_power_W: float = 0.0
    harmonics: tuple[tuple[int, float, float], ...] = ()
    dc_V: float = 0.0
    events: tuple[Event, ...] = ()
    # per ADC channel: (line, current, bus), or (L, current, bus, N) with split line sensing
    noise_counts: tuple[float, ...] = (0.0, 0.0, 0.0)
    gain_error: tuple[float, ...] = (0.0, 0.0, 0.0)
    offset_counts: tuple[float, ...] = (0.0, 0.0, 0.0)
    seed: int = 0
    name: str = "scenario"
    path: str = field(default="", compare=False)  # the file it was read from ("": made in code)


def _num(src, where, v, lo, hi):
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ConfigError(f"{src}: {where} = {v!r}: expected a number")
    if not lo <= v <= hi:
        raise ConfigError(f"{src}: {where} = {v:g}: allowed range is {lo:g}..{hi:g}")
    return float(v)


def _known(src, table, given, allowed):
    import difflib

    for k in given:
        if k not in allowed:
            near = difflib.get_close_matches(k, list(allowed), n=1)
            hint = f"; did you mean '{near[0]}'?" if near else f"; known: {', '.join(allowed)}"
            raise ConfigError(f"{src}: unknown key in {table} '{k}'{hint}")


def _triple(src, where, v, lo, hi):
    """Per ADC channel: [line, current, bus], or [L, current, bus, N] for a design with split
    line sensing (checked against the design when run)."""
    if not isinstance(v, list) or len(v) not in (3, 4):
        raise ConfigError(
            f"{src}: {where} = {v!r}: expected three numbers [line, current, bus] (four with "
            "split line sensing: [L, current, bus, N])"
        )
    return tuple(_num(src, where, x, lo, hi) for x in v)


def _table(src: str, d: dict, name: str) -> dict:
    v = d.get(name, {})
    if not isinstance(v, dict):
        raise ConfigError(f"{src}: {name} = {v!r}: expected a table [{name}]")
    return v


def _list(src: str, where: str, v: object) -> list:
    if not isinstance(v, list):
        raise ConfigError(f"{src}: {where} = {v!r}: expected a list")
    return v


def _whole(src: str, where: str, v: object, lo: float, hi: float) -> int:
    x = _num(src, where, v, lo, hi)
    if not x.is_integer():
        raise ConfigError(f"{src}: {where} = {v!r}: expected a whole number")
    return int(x)


def _values(src: str, where: str, e: dict, keys: dict) -> tuple[tuple[str, float], ...]:
    vals = []
    for k, (lo, hi) in keys.items():
        if k not in e:
            raise ConfigError(f"{src}: {where} ({e['kind']}): {k} missing")
        vals.append((k, _num(src, f"{where} {k}", e[k], lo, hi)))
    return tuple(vals)


def _word(src: str, where: str, e: dict, key: str, allowed: tuple[str, ...]) -> str:
    v = e.get(key)
    if v is None:
        raise ConfigError(f"{src}: {where} (sensor): {key} missing ({', '.join(allowed)})")
    if not isinstance(v, str) or v not in allowed:
        raise ConfigError(f"{src}: {where} {key} = {v!r}: allowed values are {', '.join(allowed)}")
    return v


def _sensor_event(src: str, where: str, t: float, e: dict) -> Event:
    channel = _word(src, where, e, "channel", tuple(dict.fromkeys(CHANNELS + CHANNELS_SPLIT)))
    fault = _word(src, where, e, "fault", FAULTS)
    keys = dict(SENSOR_KEYS[fault])
    allowed = ["channel", "fault", *keys, "duration"]
    _known(
        src, f"{where} ({fault})", {k: v for k, v in e.items() if k not in ("t", "kind")}, allowed
    )
    vals = _values(src, where, e, keys)
    if "periods" in keys and not float(e["periods"]).is_integer():
        raise ConfigError(f"{src}: {where} periods = {e['periods']!r}: expected a whole number")
    if "duration" in e:
        vals += (("duration", _num(src, f"{where} duration", e["duration"], 0.0, 1e4)),)
    return Event(t, "sensor", vals, (("channel", channel), ("fault", fault)))


def from_dict(d: dict, src: str = "<scenario>") -> Scenario:
    if not isinstance(d, dict):
        raise ConfigError(f"{src}: expected TOML tables")
    _known(src, "the scenario", d, ["duration", "grid", "load", "sensors", "event", "name"])
    grid, load, sens = (_table(src, d, t) for t in ("grid", "load", "sensors"))
    _known(src, "[grid]", grid, ["vrms", "freq", "phase_deg", "harmonics", "dc"])
    _known(src, "[load]", load, ["kind", "power"])
    _known(src, "[sensors]", sens, ["noise_counts", "gain_error", "offset_counts", "seed"])
    if "duration" not in d:
        raise ConfigError(f"{src}: duration: missing (s)")
    kind = load.get("kind", "resistive")
    if not isinstance(kind, str) or kind not in ("resistive", "constant_power"):
        raise ConfigError(
            f"{src}: [load] kind = {kind!r}: allowed values are resistive, constant_power"
        )
    harm = []
    for h in _list(src, "[grid] harmonics", grid.get("harmonics", [])):
        if not isinstance(h, list) or len(h) != 3:
            raise ConfigError(
                f"{src}: [grid] harmonics entry {h!r}: expected [order, fraction, phase_deg]"
            )
        harm.append(
            (
                _whole(src, "[grid] harmonics order", h[0], 2, 50),
                _num(src, "[grid] harmonics fraction", h[1], 0.0, 0.5),
                _num(src, "[grid] harmonics phase_deg", h[2], -360.0, 360.0),
            )
        )
    events = []
    for n, e in enumerate(_list(src, "event", d.get("event", []))):
        where = f"[[event]] #{n + 1}"
        if not isinstance(e, dict) or "kind" not in e or "t" not in e:
            raise ConfigError(f"{src}: {where}: needs t (s) and kind")
        if not isinstance(e["kind"], str) or e["kind"] not in EVENT_KEYS:
            raise ConfigError(
                f"{src}: {where} kind = {e['kind']!r}: allowed values are {', '.join(EVENT_KEYS)}"
            )
        t = _num(src, f"{where} t", e["t"], 0.0, 1e4)
        if e["kind"] == "sensor":
            events.append(_sensor_event(src, where, t, e))
            continue
        keys = EVENT_KEYS[e["kind"]]
        _known(src, where, {k: v for k, v in e.items() if k not in ("t", "kind")}, list(keys))
        events.append(Event(t, e["kind"], _values(src, where, e, keys)))
    duration = _num(src, "duration", d["duration"], 1e-4, 1e4)
    late = [ev for ev in events if ev.t_s >= duration]
    if late:
        raise ConfigError(
            f"{src}: an event at t = {late[0].t_s:g} s: after the run's end "
            f"(duration = {duration:g} s), it would never happen"
        )
    return Scenario(
        duration_s=duration,
        vrms_V=_num(src, "[grid] vrms", grid.get("vrms", 230.0), 0.0, 1000.0),
        freq_Hz=_num(src, "[grid] freq", grid.get("freq", 50.0), 1.0, 1000.0),
        phase_deg=_num(src, "[grid] phase_deg", grid.get("phase_deg", 0.0), -360.0, 360.0),
        load_kind=kind,
        load_power_W=_num(src, "[load] power", load.get("power", 0.0), 0.0, 1e7),
        harmonics=tuple(harm),
        dc_V=_num(src, "[grid] dc", grid.get("dc", 0.0), -1000.0, 1000.0),
        events=tuple(sorted(events, key=lambda ev: ev.t_s)),
        noise_counts=_triple(
            src, "[sensors] noise_counts", sens.get("noise_counts", [0, 0, 0]), 0.0, 1000.0
        ),
        gain_error=_triple(
            src, "[sensors] gain_error", sens.get("gain_error", [0, 0, 0]), -0.5, 0.5
        ),
        offset_counts=_triple(
            src, "[sensors] offset_counts", sens.get("offset_counts", [0, 0, 0]), -65535.0, 65535.0
        ),
        seed=_whole(src, "[sensors] seed", sens.get("seed", 0), 0, 2**63),
        name=str(d.get("name", Path(src).stem)),
        path=src if src != "<scenario>" else "",
    )


def load(path: str | Path) -> Scenario:
    path = Path(path)
    data = read_toml(path)
    return from_dict(data, str(path))


def _fmt(x: float) -> str:
    return repr(float(x))


def dumps(s: Scenario) -> str:
    """TOML text that ``load`` reads back to an equal Scenario (floats by repr: exact)."""
    lines = [
        f'name = "{s.name}"',
        f"duration = {_fmt(s.duration_s)}",
        "",
        "[grid]",
        f"vrms = {_fmt(s.vrms_V)}",
        f"freq = {_fmt(s.freq_Hz)}",
        f"phase_deg = {_fmt(s.phase_deg)}",
        f"dc = {_fmt(s.dc_V)}",
    ]
    if s.harmonics:
        lines.append(
            "harmonics = ["
            + ", ".join(f"[{k}, {_fmt(a)}, {_fmt(p)}]" for k, a, p in s.harmonics)
            + "]"
        )
    lines += [
        "",
        "[load]",
        f'kind = "{s.load_kind}"',
        f"power = {_fmt(s.load_power_W)}",
        "",
        "[sensors]",
    ]
    for key, v in (
        ("noise_counts", s.noise_counts),
        ("gain_error", s.gain_error),
        ("offset_counts", s.offset_counts),
    ):
        lines.append(f"{key} = [{', '.join(_fmt(x) for x in v)}]")
    lines.append(f"seed = {s.seed}")
    for e in s.events:
        lines += ["", "[[event]]", f"t = {_fmt(e.t_s)}", f'kind = "{e.kind}"']
        lines += [f'{k} = "{w}"' for k, w in e.words]
        lines += [f"{k} = {_fmt(v)}" for k, v in e.values]
    return "\n".join(lines) + "\n"


def default_for(spec, duration_s: float = 0.6) -> Scenario:
    """Nominal line, full resistive load."""
    return Scenario(
        duration_s=duration_s,
        vrms_V=spec.vin_rms_nominal,
        freq_Hz=spec.line_freq,
        load_kind="resistive",
        load_power_W=spec.power,
        name="nominal_full_load",
    )
