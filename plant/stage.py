"""Totem-pole PFC power stage, batch of ``n`` scenarios in lockstep.

Circuit: grid source (``v_s``, ``R_src``, ``L_src``) -> the input filter (``plant.filt``: a
differential-mode inductor and an X capacitor, whose voltage the stage sees and senses) ->
boost inductor ``L`` (DCR) -> fast-leg midpoint A; the slow-leg midpoint B returns to the other line
terminal.  With ``q_A``, ``q_B`` = 1 when a midpoint is tied to the bus plus rail
and 0 when tied to the minus rail, ``m = q_A - q_B`` and

    L_t di/dt = v_x - R_t i - m v_bus
    (L_t = L, R_t = DCR + Rds_fast + Rds_slow; without a filter v_x is v_s and the grid's
    L_src and R_src join L_t and R_t)
    C dv_C/dt = m i - i_load,   v_bus = v_C + ESR (m i - i_load)

and the sensed line voltage is the X capacitor's (without a filter: ``v_s`` less the
source-impedance drop of the period-average current).  The
load is a conductance ``G`` plus a current ``I_cp`` (constant-power part,
``P/v_bus`` frozen over each period).  A conducting switch fixes its midpoint;
with neither switch of a leg on, the body diode (or diode) that the current
sign forward-biases does (``q_A = 1`` for ``i > 0``, ``0`` for ``i < 0``; the
slow leg the other way round).  When a diode current reaches zero the event
time is found (Newton on the exact solution) and the current stays at zero
until the inductor voltage forward-biases a path again: discontinuous
conduction.  The slow midpoint has a node capacitance: with neither slow device on it floats,
and a current that needs it on the other rail first swings its charge through the inductor
(``plant.solver.swing``); a slow switch turning on moves it through its own channel.

One PWM period (center-aligned): fast low switch commanded on for ``dL T/2`` at
each end (``dL`` = compare/period), high switch in the middle, the timer's dead
time at each edge.  The ADC samples at ``T/2``.  Each sub-interval is linear and
solved exactly (``plant.kernel``, which also holds the averaged model; ``plant.batch``
runs a batch of lanes).  Diode forward drops are not modelled (a
resistive path only); the fast leg's transitions, its reverse conduction in the
dead time, core loss and the winding's AC resistance are taken per period from the
bus (``plant.losses``).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class StageParams:
    """Power-stage numbers (SI)."""

    inductance_H: float
    capacitance_F: float
    inductor_dcr_ohm: float
    capacitor_esr_ohm: float
    rds_on_fast_ohm: float
    rds_on_slow_ohm: float
    dead_time_s: float
    fsw_Hz: float
    period_counts: int
    source_resistance_ohm: float = 0.0
    source_inductance_H: float = 0.0
    inrush_resistance_ohm: float = (
        0.0  # series limiter, bypassed by a relay the controller commands
    )
    relay_delay_s: float = 0.01  # the relay follows its command this long after
    # the losses of ``plant.losses`` (zero: none)
    node_capacitance_F: float = 0.0
    # the slow leg: its midpoint's capacitance (0: it moves at once), diodes (True) or
    # switches, and the diodes' reverse-recovery charge (``plant.solver.segment``)
    slow_node_capacitance_F: float = 0.0
    slow_diode: bool = False
    slow_qrr_C: float = 0.0
    transition_time_s: float = 0.0
    reverse_drop_V: float = 0.0
    fast_qrr_C: float = 0.0  # body-diode recovery at a hard turn-on
    core_energy_coeff: float = 0.0  # J per period per A^beta of ripple
    core_beta: float = 2.5
    ac_copper_ohm: float = 0.0  # the winding's extra resistance to the ripple
    # the input filter (``plant.filt``; x_capacitance 0: none, the grid's impedance then in
    # series with the boost inductor)
    x_capacitance_F: float = 0.0
    dm_inductance_H: float = 0.0
    dm_resistance_ohm: float = 0.0
    dm_damping_ohm: float = 1e9  # the damping resistor across the DM inductor
    # the PWM carrier (``design.contract.TIMINGS``): centre-aligned (False) or edge-aligned
    edge_carrier: bool = False

    @property
    def filtered(self) -> bool:
        return self.x_capacitance_F > 0.0

    @property
    def period_s(self) -> float:
        return 1.0 / self.fsw_Hz

    @property
    def l_total_H(self) -> float:
        """The inductance the stage's current sees: the boost inductor, plus the grid's when
        no X capacitor stands between them."""
        return self.inductance_H + (0.0 if self.filtered else self.source_inductance_H)

    @property
    def r_total_ohm(self) -> float:
        return (
            self.inductor_dcr_ohm
            + (0.0 if self.filtered else self.source_resistance_ohm)
            + self.rds_on_fast_ohm
            + self.rds_on_slow_ohm
        )
