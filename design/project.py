"""One place that joins a config, the sizing, the derived values and the loop tuning."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from .config import Config, load
from .derive import Resolved, resolve
from .sizing import Sizing, size
from .tuning import Tuning, tune


@dataclass(frozen=True)
class Project:
    """A validated config with its sizing (at the L and C in force), its derived values and
    the tuning of both loops at the nominal line frequency."""

    config: Config
    sizing: Sizing
    resolved: Resolved
    tuning: Tuning

    def tuning_at(self, line_freq_Hz: float) -> Tuning:
        """Both loops tuned for another line frequency (the voltage loop's update follows it)."""
        return tune(self.config, self.resolved, line_freq_Hz)


def from_config(cfg: Config) -> Project:
    rules = size(cfg.spec)
    L = cfg.plant.inductance if cfg.plant.inductance is not None else rules.inductance_H
    C = cfg.plant.capacitance if cfg.plant.capacitance is not None else rules.capacitance_F
    # stress figures use the L and C in force; the capacitance rules are kept for reporting
    sized = replace(
        size(cfg.spec, inductance=L, capacitance=C),
        capacitance_ripple_F=rules.capacitance_ripple_F,
        capacitance_holdup_F=rules.capacitance_holdup_F,
    )
    r = resolve(cfg, L, C, sized.il_peak_A)
    return Project(cfg, sized, r, tune(cfg, r))


def load_project(path: str | Path) -> Project:
    return from_config(load(path))
