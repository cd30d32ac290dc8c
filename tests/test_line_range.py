"""The line channel's default full scale covers the highest voltage the stage's input can
show: with an input filter, where its X capacitor rings when the line steps from 0 to its
peak; without one, the terminals during a rectified
surge, where the grid's inductance L_s and the boost inductor L divide the line-to-bus
difference (a divider of two inductances carrying one current: hand arithmetic)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from design.derive import line_terminal_max_V
from design.filter import step_peak
from design.project import from_config, load_project
from design.rules import RANGE_MARGIN
from plant.batch import FIELDS, Plant
from plant.grid import Grid
from plant.load import Load
from plant.stage import StageParams

from .helpers import EXAMPLES


def test_default_range_by_the_inductive_divider():
    cfg = load_project(EXAMPLES / "appliance_1k2.toml").config.replace("plant", x_capacitance=0.0)
    prj = from_config(cfg)  # no input filter
    r = prj.resolved
    vpk = math.sqrt(2.0) * cfg.spec.vin_rms_max
    ls, lb = cfg.plant.source_inductance, r.inductance_H
    assert cfg.plant.x_capacitance == 0.0 and ls > 0.0
    expect = RANGE_MARGIN * (vpk + ls / (ls + lb) * (r.ov_trip_V - vpk))
    assert r.vac_range_V == pytest.approx(expect, rel=1e-12)
    assert r.vac_range_V > RANGE_MARGIN * vpk * 1.1  # the surge needs real headroom here
    # with a filter: where the X capacitor rings when the line steps from 0 to its peak
    # (design.filter.step_peak, checked against scipy in tests/test_filter.py), at most the
    # over-voltage trip
    fcfg = cfg.replace("plant", x_capacitance=1.5e-6)
    filtered = from_config(fcfg).resolved
    pl = fcfg.plant
    s = step_peak(
        pl.source_inductance,
        pl.source_resistance,
        pl.dm_inductance,
        pl.dm_resistance,
        filtered.dm_damping_ohm,
        1.5e-6,
    )
    assert 1.0 < s < 2.0
    assert filtered.vac_range_V == pytest.approx(
        RANGE_MARGIN * min(filtered.ov_trip_V, vpk * s), rel=1e-12
    )
    assert line_terminal_max_V(cfg, vpk, r.ov_trip_V, lb) == pytest.approx(expect / RANGE_MARGIN)


def test_plant_terminals_in_a_surge_sit_where_the_divider_puts_them():
    """The plant without a filter, every gate off, a line (held at one instant, DC) above the
    bus: the diodes carry a rising current, and the sensed line (the stage's terminals) reads
    vs - L_s/(L_s + L) (vs - v_bus), to the resistive drop."""
    ls, lb, vs, vbus = 20e-6, 25e-6, 380.0, 330.0
    p = StageParams(
        inductance_H=lb,
        capacitance_F=1.0,
        inductor_dcr_ohm=1e-4,
        capacitor_esr_ohm=0.0,
        rds_on_fast_ohm=1e-4,
        rds_on_slow_ohm=1e-4,
        dead_time_s=0.0,
        fsw_Hz=100e3,
        period_counts=1000,
        source_resistance_ohm=0.0,
        source_inductance_H=ls,
    )
    st = Plant(
        p, Grid(1, 0.0, 50.0, dc_V=vs), Load(1, "resistive", 0.0, 400.0, 0.0, 0.0), None, 0.0, vbus
    )
    out = np.zeros((1, len(FIELDS)))
    for k in range(5):
        st.step(k, np.zeros(1, dtype=np.uint16), np.zeros(1, dtype=np.uint8), out)
    assert out[0, FIELDS.index("i_avg_A")] > 10.0  # a surge through the diodes
    vterm = out[0, FIELDS.index("vterm_V")]
    assert vterm == pytest.approx(vs - ls / (ls + lb) * (vs - vbus), abs=0.05)
    assert vterm > vbus  # between the bus and the line, well off the line
