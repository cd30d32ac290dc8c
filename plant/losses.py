"""The losses the exact circuit solution does not carry, per switching period: the fast leg's
transitions (switching), its reverse conduction while neither switch is on (dead time), the
inductor's core and the winding's AC resistance on the ripple.  ``plant.kernel`` takes each
period's sum out of the bus capacitor's energy, so the loops must supply it and the stage's
efficiency counts it; the records keep each kind.

Fast-leg transitions (centre-aligned PWM: the low switch turns off at t1 and the high one
turns on at t1 + dead time; the high one turns off at t2 and the low one turns on at t2 + dead
time).  The current at the turn-off edge decides the transition:

- carried toward the incoming switch's rail (i > 0 at t1, i < 0 at t2): the outgoing switch
  turns off with that current (overlap E = v |i| t_tr / 2), and the current then swings the
  switch node over the dead time, charge |i| t_dead against the node's C v: the incoming
  switch turns on at zero voltage once the swing is complete, otherwise at the fraction left
  (E = C (v (1 - x))^2 / 2, x = |i| t_dead/(C v), a linear node capacitance);
- carried away from it (hard): the outgoing switch's current stays in its body diode, and
  the incoming switch discharges the node (E = C v^2 / 2, the node's energy-equivalent
  capacitance of both devices), takes the current with overlap (E = v |i| t_tr / 2) and
  sweeps the body diode's recovery charge at the bus voltage (E = Q_rr v, ``fast_qrr``);
- zero (discontinuous conduction): the node rests where the inductor has no voltage, |v_s|
  from the incoming switch's rail, and that switch discharges it (E = C vs^2 / 2; the ring
  of the node around that level is not followed).

Reverse conduction: while neither fast switch is on, the current flows in a body diode (or
the third quadrant of a wide-bandgap switch) at ``reverse_drop``: E = V_rev |q| over each such
sub-interval (``plant.kernel`` accumulates it with the sub-interval's charge q).

Core: Steinmetz, P_v = k f^alpha B^beta, with f = fsw and B half the period's flux swing,
B = (i_max - i_min) B_peak/I_peak / 2 (the flux follows the current in an ungapped-linear
inductor): E = k fsw^(alpha - 1) V_core B^beta per period.  Copper: the ripple's rms
(i_max - i_min)/(2 sqrt 3) (a triangle) in the winding's extra AC resistance,
(ac_factor - 1) DCR; the DC resistance already sits in the circuit.
"""

from __future__ import annotations

from .jit import jit_inline
from .layout import P_ACX, P_CNODE, P_CORE_BETA, P_CORE_C, P_QRRF, P_T, P_TDEAD, P_TTR


@jit_inline
def _soft_on(c_node, v, i_abs, t_dead, swung):
    """Turn-on energy after a swing the current drives: none once complete."""
    if c_node <= 0.0 or v <= 0.0:
        return 0.0
    x = 1.0 if swung else min(1.0, i_abs * t_dead / (c_node * v))
    rest = v * (1.0 - x)
    return 0.5 * c_node * rest * rest


@jit_inline
def switching_energy(par, v, vs, glo, ghi, i_t1, i_b2, i_t2, i_b4):
    """Energy (J) of one period's fast-leg transitions, with the bus ``v``, the line ``vs``,
    whether the low (``glo``) and high (``ghi``) switch had on-time, and the current at the
    four edges (t1, t1 + dead, t2, t2 + dead)."""
    c, ttr, td = par[P_CNODE], par[P_TTR], par[P_TDEAD]
    e_rr = par[P_QRRF] * v  # the outgoing switch's body diode recovered at the bus voltage
    e = 0.0
    # low off at t1, high on after the dead time
    if glo and i_t1 > 0.0:
        e += 0.5 * v * i_t1 * ttr
    if ghi:
        if i_t1 > 0.0:
            e += _soft_on(c, v, i_t1, td, not glo)
        elif i_t1 < 0.0:
            e += 0.5 * c * v * v + 0.5 * v * abs(i_b2) * ttr + e_rr
        else:
            e += 0.5 * c * vs * vs
    # high off at t2, low on after the dead time
    if ghi and i_t2 < 0.0:
        e += 0.5 * v * (-i_t2) * ttr
    if glo:
        if i_t2 < 0.0:
            e += _soft_on(c, v, -i_t2, td, not ghi)
        elif i_t2 > 0.0:
            e += 0.5 * c * v * v + 0.5 * v * abs(i_b4) * ttr + e_rr
        else:
            e += 0.5 * c * vs * vs
    return e


@jit_inline
def core_energy(par, di):
    """Core energy (J) of a period whose current swings by ``di`` (A)."""
    if di <= 0.0 or par[P_CORE_C] <= 0.0:
        return 0.0
    return par[P_CORE_C] * di ** par[P_CORE_BETA]


@jit_inline
def ac_copper_energy(par, di):
    """The winding's AC-resistance energy (J) on a ripple of ``di`` (A) peak to peak."""
    return par[P_ACX] * di * di * par[P_T]
