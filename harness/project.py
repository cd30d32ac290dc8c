"""One place that joins a config, the sizing and the resolved numbers."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from codegen.config import Config, load
from codegen.resolve import Resolved, resolve
from plant.sizing import Sizing, size


@dataclass(frozen=True)
class Project:
    """A validated config with its sizing (at the resolved L and C) and derived values."""

    config: Config
    sizing: Sizing
    resolved: Resolved


def from_config(cfg: Config) -> Project:
    rules = size(cfg.spec)
    L = cfg.plant.inductance if cfg.plant.inductance is not None else rules.inductance_H
    C = cfg.plant.capacitance if cfg.plant.capacitance is not None else rules.capacitance_F
    sized = size(cfg.spec, inductance=L, capacitance=C)
    # keep the rule values for reporting; stress figures use the L and C in force
    sized = Sizing(**{**sized.as_dict(), "inductance_H": L, "capacitance_F": C,
                      "capacitance_ripple_F": rules.capacitance_ripple_F,
                      "capacitance_holdup_F": rules.capacitance_holdup_F})
    return Project(cfg, sized, resolve(cfg, L, C, sized.il_peak_A))


def load_project(path: str | Path) -> Project:
    return from_config(load(path))
