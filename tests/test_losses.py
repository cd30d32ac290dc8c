"""The plant's loss model (``plant.losses``): each transition's energy against the relations it
states, and the closed-loop report's losses against the energy balance.

Sources: a linear capacitance C charged to v stores C v^2 / 2 (its discharge through a
switch dissipates it); a linear voltage-current overlap of duration t_tr dissipates
v i t_tr / 2 (Erickson & Maksimovic, Fundamentals of Power Electronics, ch. 4, switching
loss with a linear transition); Steinmetz's relation P_v = k f^alpha B^beta (the classical
core-loss fit, any magnetics text)."""

from __future__ import annotations

import numpy as np
import pytest

from plant import layout as LY
from plant.losses import ac_copper_energy, core_energy, switching_energy

C_NODE, T_TR, T_DEAD = 200e-12, 10e-9, 100e-9


def par(c=C_NODE, ttr=T_TR, td=T_DEAD):
    p = np.zeros(LY.PAR_ROWS)
    p[LY.P_CNODE], p[LY.P_TTR], p[LY.P_TDEAD], p[LY.P_T] = c, ttr, td, 1.0 / 65e3
    return p


def test_hard_turn_on_dissipates_the_node_energy_and_the_overlap():
    """Positive half, forward current 10 A at both edges, only the low switch gated (the
    synchronous switch off): the low switch turns off with 10 A (overlap) and turns on
    against a node the current holds at the bus (C v^2/2 + overlap)."""
    v, i = 400.0, 10.0
    e = switching_energy(par(), v, 100.0, True, False, i, i, i, i)
    assert e == pytest.approx(0.5 * v * i * T_TR + 0.5 * C_NODE * v * v + 0.5 * v * i * T_TR)


def test_hard_turn_on_sweeps_the_body_diodes_recovery_charge():
    """The same hard turn-on with a fast-leg body diode of 60 nC: the incoming switch sweeps
    that charge at the bus voltage, Q_rr v more (the usual estimate of a diode's recovery
    energy in the switch that takes its current); a soft turn-on does not."""
    v, i, qrr = 400.0, 10.0, 60e-9
    p = par()
    p[LY.P_QRRF] = qrr
    e = switching_energy(p, v, 100.0, True, False, i, i, i, i)
    base = switching_energy(par(), v, 100.0, True, False, i, i, i, i)
    assert e - base == pytest.approx(qrr * v)
    soft = switching_energy(p, v, 100.0, True, True, 10.0, 10.0, -5.0, -5.0)
    assert soft == pytest.approx(
        switching_energy(par(), v, 100.0, True, True, 10.0, 10.0, -5.0, -5.0)
    )


def test_a_current_that_swings_the_node_makes_the_turn_on_soft():
    """Negative current at t2 (the high switch turns off, the low one turns on after the dead
    time): 5 A x 100 ns = 500 nC against 200 pF x 400 V = 80 nC swings the node fully, so
    the low switch turns on at zero voltage; only the high switch's turn-off overlap stays."""
    v = 400.0
    e = switching_energy(par(), v, 100.0, True, True, 1.0, 1.0, -5.0, -5.0)
    # edge t1: low off with +1 A (overlap), high on after a partial swing of 100 nC > 80 nC
    e_t1 = 0.5 * v * 1.0 * T_TR
    e_t2 = 0.5 * v * 5.0 * T_TR
    assert e == pytest.approx(e_t1 + e_t2)


def test_a_small_current_leaves_part_of_the_node_to_discharge():
    """0.2 A x 100 ns = 20 nC of the 80 nC swing: a quarter; the low switch then discharges
    the three quarters of 400 V left: C (300 V)^2 / 2."""
    v = 400.0
    e = switching_energy(par(), v, 100.0, True, True, 1.0, 1.0, -0.2, -0.2)
    e_t1 = 0.5 * v * 1.0 * T_TR
    e_t2 = 0.5 * v * 0.2 * T_TR + 0.5 * C_NODE * 300.0**2
    assert e == pytest.approx(e_t1 + e_t2)


def test_zero_current_turn_on_discharges_from_the_line_level():
    """Discontinuous conduction: no current at either edge; the node rests |v_s| from the
    incoming switch's rail."""
    e = switching_energy(par(), 400.0, 150.0, True, True, 0.0, 0.0, 0.0, 0.0)
    assert e == pytest.approx(2 * 0.5 * C_NODE * 150.0**2)


def test_no_gates_no_switching_loss():
    assert switching_energy(par(), 400.0, 300.0, False, False, 20.0, 20.0, 20.0, 20.0) == 0.0


def test_core_and_ac_copper_follow_their_relations():
    p = par()
    p[LY.P_CORE_C], p[LY.P_CORE_BETA], p[LY.P_ACX] = 2e-6, 2.5, 0.01
    assert core_energy(p, 4.0) == pytest.approx(2e-6 * 4.0**2.5)
    assert core_energy(p, 0.0) == 0.0
    assert ac_copper_energy(p, 4.0) == pytest.approx(0.01 * 16.0 / 65e3)


@pytest.mark.slow
def test_report_counts_every_loss_and_the_balance_closes(demo_project):
    """Full load at 264 V: each kind of loss present and positive, the balance residual
    within 0.5 % of their sum (the plant drains exactly what it records), the efficiency in
    the band of real stages, and the
    efficiency below the one without the new losses (the same run with them set to zero)."""
    from dataclasses import replace

    from design.project import from_config
    from harness.closedloop import report
    from harness.closedloop.loop import run
    from harness.closedloop.scenario import Scenario

    scn = Scenario(duration_s=0.6, vrms_V=264.0, freq_Hz=50.0, load_power_W=1500.0)
    rep = report.lane_report(run(demo_project, [scn], progress=False))
    losses = rep["losses_W"]
    for k in ("conduction", "switching", "deadtime", "inductor_copper", "inductor_core"):
        assert losses[k] > 0.0, k
    assert rep["losses_not_modelled"] == []
    assert abs(rep["balance_residual_W"]) <= 0.005 * sum(losses.values())
    # the band of real kW totem-pole stages at full load and high line, 97 % to 99 % (common
    # practice; the demo's parts are a hot SiC/superjunction class with a powder-core choke)
    assert 0.97 <= rep["efficiency"] <= 0.99
    cfg = demo_project.config
    bare = replace(
        cfg,
        plant=replace(
            cfg.plant,
            node_capacitance=0.0,
            slow_node_capacitance=0.0,
            fast_qrr=0.0,
            transition_time=0.0,
            reverse_drop=0.0,
            core_k=0.0,
            inductor_ac_factor=1.0,
        ),
    )
    prj0 = from_config(bare)
    rep0 = report.lane_report(run(prj0, [scn], progress=False))
    extra = sum(losses[k] for k in ("switching", "deadtime", "inductor_core"))
    assert rep0["losses_W"]["switching"] == 0.0
    # the input power rises by about what the new losses take (the loops supply them)
    assert rep["p_in_W"] - rep0["p_in_W"] == pytest.approx(extra, rel=0.3, abs=0.5)


@pytest.mark.slow
def test_averaged_model_takes_the_losses_from_its_ripple(demo_project):
    """The averaged model estimates each period's transitions, dead time, core and ripple
    losses from the ripple its duty gives about the average (continuous conduction): at full
    load and 230 V each kind within 10 % of the switching model's, and the efficiency within
    0.1 percentage points (the capacitor's switching-frequency current is the part it leaves
    out)."""
    from harness.closedloop import report
    from harness.closedloop.loop import run
    from harness.closedloop.scenario import Scenario

    scn = Scenario(duration_s=0.6, vrms_V=230.0, freq_Hz=50.0, load_power_W=1500.0)
    sw = report.lane_report(run(demo_project, [scn], progress=False))
    av = report.lane_report(run(demo_project, [scn], model="averaged", progress=False))
    for k in ("conduction", "switching", "deadtime", "inductor_copper", "inductor_core"):
        assert av["losses_W"][k] == pytest.approx(sw["losses_W"][k], rel=0.10), k
    assert abs(av["efficiency"] - sw["efficiency"]) < 0.001
