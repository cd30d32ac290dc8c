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


def tuning_of(prj: Project, line_freq_Hz: float | None = None):
    from codegen.tuning import tune

    r = prj.resolved
    return tune(prj.config, r.inductance_H, r.capacitance_F, r.current_bandwidth_Hz, line_freq_Hz)


def render_of(prj: Project, test_break: str | None = None) -> dict[str, str]:
    from codegen.render import render

    return render(prj.config, prj.resolved, tuning_of(prj), prj.sizing.iline_peak_A, test_break)


def build_of(prj: Project, test_break: str | None = None):
    """The generated controller plus the host-only batch sources, compiled (cached)."""
    from codegen.build import build
    from codegen.render import render_host

    return build(render_of(prj, test_break), prj.config.control.prefix, extra_c=render_host(prj.config))
