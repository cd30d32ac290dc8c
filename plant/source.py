"""The grid source of a lane: the fundamental and harmonics at a time within the period
(angle addition from the carried sin/cos of the phase), and the phase carried by rotation."""

from __future__ import annotations

import math

from .jit import jit_inline
from .layout import L_C0, L_DC, L_FREQ, L_S0, L_THETA, L_VRMS, SQRT2, TWO_PI


# -- the grid source -----------------------------------------------------------------------
@jit_inline
def source_at(lane, harm, j, scale, t, s0, c0):
    """Source voltage (V) of lane ``j`` at ``t`` s after the present period start;
    ``harm[j, h] = (order, amplitude fraction, phase rad)``, shape (n, orders, 3); ``s0, c0``
    = sin, cos of the phase at the period start.  The fundamental by angle addition, with sin
    and cos of the small advance ``x = 2 pi f t``
    from their series (to below 1e-18 for |x| <= 0.05 rad; larger ``x`` by the library)."""
    x = TWO_PI * lane[j, L_FREQ] * t
    sx, cx = small_sin_cos(x)
    wave = s0 * cx + c0 * sx
    if harm.shape[1]:
        th = lane[j, L_THETA] + x
        for h in range(harm.shape[1]):
            wave = wave + harm[j, h, 1] * math.sin(harm[j, h, 0] * th + harm[j, h, 2])
    return SQRT2 * lane[j, L_VRMS] * scale * wave + lane[j, L_DC]


@jit_inline
def small_sin_cos(x):
    """sin and cos of an angle of at most 0.05 rad by their series (to below 1e-17), larger
    ones by the library."""
    if abs(x) <= 0.05:
        x2 = x * x  # Horner with the reciprocals as constants: products, no division
        return (
            x * (1.0 - x2 * (1.0 / 6.0) * (1.0 - x2 * (1.0 / 20.0) * (1.0 - x2 * (1.0 / 42.0)))),
            1.0
            - x2
            * 0.5
            * (1.0 - x2 * (1.0 / 12.0) * (1.0 - x2 * (1.0 / 30.0) * (1.0 - x2 * (1.0 / 56.0)))),
        )
    return math.sin(x), math.cos(x)


@jit_inline
def advance_phase(lane, j, T):
    """The line phase one period on, kept in [0, 2 pi) (a frequency step keeps the wave
    continuous); its sine and cosine follow by rotation and are taken afresh from the library
    once a cycle, when the phase wraps, so rounding cannot build up."""
    x = TWO_PI * lane[j, L_FREQ] * T
    th = lane[j, L_THETA] + x
    if th >= TWO_PI or th < 0.0:
        while th >= TWO_PI:
            th -= TWO_PI
        while th < 0.0:
            th += TWO_PI
        lane[j, L_S0], lane[j, L_C0] = math.sin(th), math.cos(th)
    else:
        sx, cx = small_sin_cos(x)
        s0, c0 = lane[j, L_S0], lane[j, L_C0]
        lane[j, L_S0], lane[j, L_C0] = s0 * cx + c0 * sx, c0 * cx - s0 * sx
    lane[j, L_THETA] = th
