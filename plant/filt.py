"""The input filter between the grid and the stage, solved at the PWM period's scale.

Circuit: grid source ``v_s`` -> ``R_src``, ``L_src`` (the grid's impedance) -> the stage's
input terminals ``v_t`` -> the differential-mode inductor ``L_dm`` (winding resistance
``R_dm``) with a damping resistor ``R_d`` across it -> the X capacitor ``C_x`` (``v_x``),
from which the stage draws its current.  States ``x = (i_s, i_m, v_x)``: the line current,
the DM inductor's current and the X capacitor's voltage, with ``i_s = i_m + (v_t - v_x)/R_d``:

    L_src di_s/dt = v_s - R_src i_s - v_x - R_d (i_s - i_m)
    L_dm  di_m/dt = R_d (i_s - i_m) - R_dm i_m
    C_x   dv_x/dt = i_s - i_stage

Each period is solved exactly (the matrix exponential of the system augmented with its
inputs) with the source first-order held across the period (its value at both ends) and
the stage's current held at its period average: the X capacitor carries the inductor's
switching ripple, so the filter sees the stage's period-average current.  The stage inside
the period sees ``v_x`` moving linearly from its value at the period start to the value the
filter predicts from the last period's current (``plant.kernel``); the ripple voltage on the
X capacitor, about di_pp / (8 fsw C_x), is not fed back into the stage's solve.  A grid
without inductance is given ``MIN_L_SRC`` (its wiring) so that the filter keeps its three
states; the exact discretisation is unaffected by the stiffness this gives.
"""

from __future__ import annotations

import numpy as np

from design.filter import expm

from .jit import jit_inline
from .layout import (
    L_FIM,
    L_FIS,
    L_FISTG,
    L_FVX,
    P_FCX,
    P_FGI,
    P_FGS,
    P_FGV,
    P_FLM,
    P_FPHI,
    P_FRD,
    P_FRM,
    P_LSRC,
    P_RSRC,
    P_T,
    R_EFILT,
    R_EFSTORE,
    R_ETERM,
    R_ILINE,
    R_VTERM,
)


def discretise(
    a: np.ndarray, b_v: np.ndarray, b_i: np.ndarray, t_s: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``(Phi, g_v, g_slope, g_i)``: over ``t_s`` with the source ``v0 + slope t`` and the
    stage current ``i`` held, ``x(t_s) = Phi x0 + g_v v0 + g_slope slope + g_i i`` (exact)."""
    m = np.zeros((6, 6))
    m[:3, :3] = a
    m[:3, 3] = b_v  # the source's present value
    m[3, 4] = 1.0  # ... changes at the slope
    m[:3, 5] = b_i  # the held stage current
    e = expm(m * t_s)
    return e[:3, :3].copy(), e[:3, 3].copy(), e[:3, 4].copy(), e[:3, 5].copy()


# -- one period of a lane (the kernel's side) -------------------------------------------------
@jit_inline
def _map_row(par, r, x0, x1, x2, v0, slope, i_stage):
    """Row ``r`` of the exact period map: Phi[r] x + g_v[r] v0 + g_slope[r] slope + g_i[r] i."""
    k = P_FPHI + 3 * r
    return (
        par[k] * x0
        + par[k + 1] * x1
        + par[k + 2] * x2
        + par[P_FGV + r] * v0
        + par[P_FGS + r] * slope
        + par[P_FGI + r] * i_stage
    )


@jit_inline
def period_end(par, lane, j, v0, v1, i_stage):
    """Lane ``j``'s filter state at the period's end, ``(i_s, i_m, v_x)``, from its state at
    the start (``lane``), the source at the period's start and end (V) and the stage's
    period-average current (A), by the exact period map in ``par`` (``plant.batch.stage_par``)."""
    x0, x1, x2 = lane[j, L_FIS], lane[j, L_FIM], lane[j, L_FVX]
    slope = (v1 - v0) / par[P_T]
    return (
        _map_row(par, 0, x0, x1, x2, v0, slope, i_stage),
        _map_row(par, 1, x0, x1, x2, v0, slope, i_stage),
        _map_row(par, 2, x0, x1, x2, v0, slope, i_stage),
    )


@jit_inline
def advance(par, lane, j, v0, v1, i_stage, out):
    """Move lane ``j``'s filter over the period just solved (the stage drew ``i_stage`` on
    average) and write its records into ``out`` (the lane's row): the line current's period
    average, the energy in at the stage's terminals, the filter's resistive loss (trapezoids
    over the period's ends) and its stored energy at the end; the sensed line voltage is the X
    capacitor's at mid-period (the mean of its ends)."""
    T, rd, rm = par[P_T], par[P_FRD], par[P_FRM]
    is0, im0, vx0 = lane[j, L_FIS], lane[j, L_FIM], lane[j, L_FVX]
    is1, im1, vx1 = period_end(par, lane, j, v0, v1, i_stage)
    vt0 = vx0 + rd * (is0 - im0)  # the terminals: the X capacitor plus the damper's drop
    vt1 = vx1 + rd * (is1 - im1)
    out[R_ILINE] = 0.5 * (is0 + is1)
    out[R_ETERM] = 0.5 * T * (vt0 * is0 + vt1 * is1)
    out[R_EFILT] = (
        0.5 * T * (rm * (im0 * im0 + im1 * im1) + rd * ((is0 - im0) ** 2 + (is1 - im1) ** 2))
    )
    out[R_EFSTORE] = 0.5 * par[P_FLM] * im1 * im1 + 0.5 * par[P_FCX] * vx1 * vx1
    out[R_VTERM] = 0.5 * (vx0 + vx1)
    lane[j, L_FIS], lane[j, L_FIM], lane[j, L_FVX] = is1, im1, vx1
    lane[j, L_FISTG] = i_stage


@jit_inline
def no_filter(par, out, i_avg, e_in, i2, i0, i1):
    """The same records without a filter: the line current is the stage's, the terminals'
    energy the source's less the grid impedance's loss and stored change."""
    out[R_ILINE] = i_avg
    out[R_ETERM] = e_in - par[P_RSRC] * i2 - 0.5 * par[P_LSRC] * (i1 * i1 - i0 * i0)
    out[R_EFILT] = 0.0
    out[R_EFSTORE] = 0.0
