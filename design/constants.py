"""Every constant of the generated C, with its unit and where it came from.

A table of short rows, one group of the firmware at a time; each rule's number is a named
module constant, written once.  Values are SI (float builds store them as they are; q15
builds as ``round(value / q_base x 2^q_bits)`` in int32, see ``codegen.literals``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from . import const_control as cc
from . import const_signal as cs
from .project import Project
from .rules import Add


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
