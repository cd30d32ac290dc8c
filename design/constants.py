"""Every constant of the generated C, with its unit and where it came from.

A table of short rows, one group of the firmware at a time; each rule's number is a named
module constant, written once.  Values are SI (float builds store them as they are; q15
builds as ``round(value / q_base x 2^q_bits)`` in int32, see ``codegen.literals``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from . import const_control as cc
from . import const_safety as sf
from . import const_signal as cs
from .config import ConfigError, where
from .project import Project
from .rules import COUNTER_LIMITS, Add


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


GROUPS: list[tuple[str, Callable[[Add, Project], None]]] = [
    ("Per-unit bases (q15 builds store signals as value/base x 2^15)", cs.bases),
    ("ADC and sensing", cs.sensing),
    ("Polarity and zero crossing", cs.polarity),
    ("RMS and brown-out", cs.rms),
    ("Voltage loop", cc.vloop),
    ("Current reference and loop", cc.iloop),
    ("PWM", cc.pwm),
    ("Supervisor and protection", cc.protection),
    ("Sensor plausibility", sf.plausibility),
    ("Slow leg, synchronous switch and line guards", sf.guards),
    ("Inrush relay and power good", sf.relay),
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
    _check_counters(prj, out)
    return out


def _check_counters(prj: Project, consts: list[Const]) -> None:
    """Every count the firmware keeps in a C counter must fit it: refused, naming the key."""
    fsw = prj.config.spec.fsw
    for k in consts:
        if k.name not in COUNTER_LIMITS:
            continue
        lo, hi, (table, key), counter = COUNTER_LIMITS[k.name]
        if lo <= k.value <= hi:
            continue
        value = getattr(getattr(prj.config, table), key)
        raise ConfigError(
            f"{where(prj.config.source, table, key)} = {value:g}: gives {k.name} = {k.value:g} "
            f"{k.unit} ({k.origin}) at fsw = {fsw:g} Hz; the firmware's {counter} holds "
            f"{lo}..{hi}: change [{table}] {key}"
        )
