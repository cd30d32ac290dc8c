"""The input filter's circuit as the design and the plant share it: grid ``R_src``, ``L_src``
-> the stage's terminals -> the differential-mode inductor ``L_dm`` (winding ``R_dm``) with a
damping resistor ``R_d`` across it -> the X capacitor ``C_x``, from which the stage draws its
current (``plant.filt`` solves it each period); and the largest voltage its capacitor rings to
after a step of the line, which sets the line channel's default range (``design.derive``)."""

from __future__ import annotations

import math

import numpy as np

MIN_L_SRC = 1e-9  # H: the wiring of a grid given as inductance-free


def system(
    l_src_H: float, r_src_ohm: float, l_dm_H: float, r_dm_ohm: float, r_d_ohm: float, c_x_F: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(A, b_v, b_i)`` of ``x' = A x + b_v v_s + b_i i_stage``, ``x = (i_s, i_m, v_x)``."""
    ls = max(l_src_H, MIN_L_SRC)
    a = np.array(
        [
            [-(r_src_ohm + r_d_ohm) / ls, r_d_ohm / ls, -1.0 / ls],
            [r_d_ohm / l_dm_H, -(r_d_ohm + r_dm_ohm) / l_dm_H, 0.0],
            [1.0 / c_x_F, 0.0, 0.0],
        ]
    )
    return a, np.array([1.0 / ls, 0.0, 0.0]), np.array([0.0, 0.0, -1.0 / c_x_F])


def expm(m: np.ndarray) -> np.ndarray:
    """exp(m) by scaling and squaring of the Taylor series (to double precision for the
    small matrices here: the scaled norm is at most 1/2 and 24 terms are summed)."""
    norm = float(np.max(np.sum(np.abs(m), axis=1)))
    s = max(0, int(math.ceil(math.log2(norm / 0.5)))) if norm > 0.5 else 0
    x = m / (2.0**s)
    out = np.eye(len(m))
    term = np.eye(len(m))
    for k in range(1, 25):
        term = term @ x / k
        out = out + term
    for _ in range(s):
        out = out @ out
    return out


def step_peak(
    l_src_H: float, r_src_ohm: float, l_dm_H: float, r_dm_ohm: float, r_d_ohm: float, c_x_F: float
) -> float:
    """The largest X capacitor voltage, per volt of a step of the source, with the filter at
    rest and no stage current (a line returning abruptly onto a stopped stage): up to 2 for an
    undamped filter. Over ten periods of the filter's resonance (the grid's and the DM
    inductance with the capacitor), by the exact step map ``expm`` of the system augmented
    with its input, 200 steps a period."""
    a, b_v, _ = system(l_src_H, r_src_ohm, l_dm_H, r_dm_ohm, r_d_ohm, c_x_F)
    f_res = 1.0 / (2.0 * math.pi * math.sqrt((max(l_src_H, MIN_L_SRC) + l_dm_H) * c_x_F))
    dt = 1.0 / (200.0 * f_res)
    m = np.zeros((4, 4))
    m[:3, :3], m[:3, 3] = a, b_v
    e = expm(m * dt)
    phi, gam = e[:3, :3], e[:3, 3]
    x, peak = np.zeros(3), 0.0
    for _ in range(2000):
        x = phi @ x + gam
        peak = max(peak, float(x[2]))
    return peak
