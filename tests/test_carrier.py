"""The sampled current plant the tuning assumes (``design.tuning.current_plant``) against the
simulated stage, for both carriers (``[control] carrier``).

Open loop on a DC source (a line frozen at one instant) into a bus held by a large
capacitor, in continuous conduction: one lane runs a constant duty, a second lane the same
duty with one period's duty raised by ``dd``. The difference of their current samples is the
stage's response to a one-period duty pulse, which must be the impulse response of the
design's ``P_i(z)`` times ``dd`` (scipy.signal.dimpulse of the design's polynomials), with
``a' = v/(2 V_o)`` for the edge-aligned carrier (its sample sits ``d T/2`` into a rising
ramp of slope ``v/L``; hand arithmetic in ``design.tuning``'s docstring).  The derivation is
checked, not restated: the stage is the exact switching solver with its dead time, ESR and
resistances.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import signal

from design.project import from_config, load_project
from design.tuning import CurrentCircuit, at_ref_gain, circuit_of, current_plant, with_plant
from harness.campaigns import fuzz
from harness.closedloop import loopgain as lg
from plant.batch import FIELDS, Plant
from plant.grid import Grid
from plant.load import Load
from plant.stage import StageParams

from .helpers import EXAMPLES, GHI, GLO, SLO

STAGE = StageParams(
    inductance_H=300e-6,
    capacitance_F=1.0,  # the bus does not move over the run
    inductor_dcr_ohm=1e-3,
    capacitor_esr_ohm=0.0,
    rds_on_fast_ohm=1e-3,
    rds_on_slow_ohm=1e-3,
    dead_time_s=100e-9,
    fsw_Hz=65e3,
    period_counts=2000,
)
V_IN, V_BUS, I0, DD = 150.0, 400.0, 8.0, 0.02
PULSE_AT = 20


def sample_difference(edge: bool, periods: int = 40) -> np.ndarray:
    p = replace(STAGE, edge_carrier=edge)
    st = Plant(
        p,
        Grid(2, 0.0, 50.0, dc_V=V_IN),
        Load(2, "resistive", 0.0, V_BUS, connect_V=0.0, uvlo_V=0.0),
        None,
        I0,
        V_BUS,
    )
    d0 = 1.0 - V_IN / V_BUS  # the duty that holds the current (losses aside)
    out = np.zeros((2, len(FIELDS)))
    gates = np.full(2, GLO | GHI | SLO, dtype=np.uint8)
    samples = []
    for k in range(periods):
        d = np.array([d0, d0 + (DD if k == PULSE_AT else 0.0)])
        compare = np.round(d * p.period_counts).astype(np.uint16)
        st.step(k, compare, gates, out)
        samples.append(out[:, FIELDS.index("i_sample_A")].copy())
    s = np.array(samples)
    assert np.all(s > 1.0)  # continuous conduction throughout
    return s[:, 1] - s[:, 0]


@pytest.mark.parametrize("carrier", ["centre", "edge"])
def test_simulated_stage_answers_a_duty_pulse_as_the_tuned_plant(carrier):
    edge = carrier == "edge"
    diff = sample_difference(edge)
    k_i = V_BUS / STAGE.inductance_H
    ts = 1.0 / STAGE.fsw_Hz
    a_rel = V_IN / (2.0 * V_BUS) if edge else 0.0
    num, den = current_plant(CurrentCircuit.inductor(STAGE.inductance_H), V_BUS, ts, carrier, a_rel)
    # the duty computed at sample k takes effect in period k + 1: the pulse of period
    # PULSE_AT is the design's input at sample PULSE_AT - 1
    _, (h,) = signal.dimpulse((num, den, ts), n=len(diff) - PULSE_AT + 1)
    expect = DD * np.ravel(h)[1:]
    got = diff[PULSE_AT:]
    dd_counts = round(DD * STAGE.period_counts) / STAGE.period_counts  # the compare's rounding
    expect *= dd_counts / DD
    assert np.all(diff[:PULSE_AT] == 0.0)  # nothing before the pulse
    # the sample within the pulse's period, then the settled step (k_i T dd): within 1 % of
    # the step (the resistances' decay over the 20 periods shown)
    step = k_i * ts * dd_counts
    assert got[0] == pytest.approx(expect[0], abs=0.01 * step)
    np.testing.assert_allclose(got[1:], expect[1:], atol=0.01 * step)
    if edge:  # the edge-aligned sample sees a' of the pulse in its own period, not half
        assert got[0] == pytest.approx(a_rel * step, rel=0.02)
    else:
        assert got[0] == pytest.approx(0.5 * step, rel=0.02)


@pytest.mark.slow
def test_measured_edge_aligned_loop_matches_the_line_cycle_mean_design():
    """The edge-aligned current loop measured in the closed-loop switching run (sine
    injection, ``pfcrig loopgain``) over whole line cycles sees the plant's a' averaged over
    the cycle: |v|/(2 V_o) in the positive half and (V_o - |v|)/(2 V_o) in the negative one,
    whose mean over a cycle is exactly 1/4 (hand arithmetic). It crosses over within 10 % of
    the design's PI on the a' = 1/4 plant with a phase margin within 5 deg of it, and never
    below the worst-case margin the design reports (a' = 0), less 1 deg."""
    prj = load_project(EXAMPLES / "appliance_1k2.toml")
    prj = from_config(prj.config.replace("control", carrier="edge"))
    lp = prj.tuning.current
    circuit = circuit_of(prj.config, prj.resolved)
    vout = prj.config.spec.vout
    num, den = current_plant(circuit, vout, lp.ts_s, "edge", 0.25)
    line = current_plant(circuit, vout, lp.ts_s, "edge", 0.25, "line")[0]
    res = lg.measure(prj, "current")
    m = res.figures()
    # at the measurement's load and line (the reference's path through the filter)
    g = lg.design_at(prj, "current", res.scenario).ref_gain_A_per_V
    mean = at_ref_gain(with_plant(lp, num, den, line), g)
    assert m["crossover_Hz"] == pytest.approx(mean.crossover_Hz, rel=0.10)
    assert m["phase_margin_deg"] == pytest.approx(mean.phase_margin_deg, abs=5.0)
    assert m["phase_margin_deg"] >= lp.phase_margin_deg - 1.0


@pytest.mark.slow
@pytest.mark.parametrize("sensor_faults", [False, True])
def test_edge_aligned_demo_holds_the_invariants(demo_project, sensor_faults):
    """The firmware generated for the edge-aligned carrier (its tuning, its current check's
    duty weighting) against the plant that follows that carrier: a bounded campaign of the
    demo with ``carrier = "edge"`` fails no invariant, plain and with sensor faults."""
    prj = from_config(demo_project.config.replace("control", carrier="edge"))
    res = fuzz.campaign(
        prj,
        64,
        seed=5 if not sensor_faults else 91,
        workers=2,
        batch=64,
        out_dir=None,
        log=lambda m: None,
        sensor_faults=sensor_faults,
    )
    failing = {k: v for k, v in res.counts().items() if v}
    assert not failing, failing
