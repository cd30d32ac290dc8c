"""The ADC of a lane: counter-based Gaussian noise (splitmix64, Box-Muller), gain and offset
errors, quantisation and rails."""

from __future__ import annotations

import math

import numpy as np

from .jit import jit, jit_inline
from .layout import (
    L_GAIN0,
    L_GAIN1,
    L_GAIN2,
    L_NOISE0,
    L_OFF0,
    P_FULL,
    P_IL_CPA,
    P_IL_OFF,
    P_VAC_CPV,
    P_VAC_OFF,
    P_VBUS_CPV,
    TWO_PI,
)


# -- the ADC -------------------------------------------------------------------------------
@jit
def _splitmix(x):
    z = x + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@jit
def gauss(seed, k, ch):
    """A standard normal draw from (seed, conversion k, channel ch) only: splitmix64, then
    Box-Muller, so a lane's noise is the same alone or in any batch."""
    base = _splitmix(seed ^ np.uint64((k * 8 + ch) & 0x7FFFFFFFFFFFFFFF))
    u1 = np.float64(_splitmix(base) >> np.uint64(11)) * (1.0 / 9007199254740992.0)
    u2 = np.float64(_splitmix(base ^ np.uint64(0xD1B54A32D192ED03)) >> np.uint64(11)) * (
        1.0 / 9007199254740992.0
    )
    return math.sqrt(-2.0 * math.log1p(-u1)) * math.cos(TWO_PI * u2)


@jit_inline
def adc_channel(par, lane, seed, j, k, ch, x):
    """Code of channel ``ch`` (0 line voltage V, 1 inductor current A, 2 bus V) of lane ``j``
    in conversion ``k``: scaling, gain and offset errors, seeded noise, rounding to the
    nearest code, rails."""
    if ch == 0:
        raw = par[P_VAC_OFF] + x * (1.0 + lane[j, L_GAIN0]) * par[P_VAC_CPV]
    elif ch == 1:
        raw = par[P_IL_OFF] + x * (1.0 + lane[j, L_GAIN1]) * par[P_IL_CPA]
    else:
        raw = x * (1.0 + lane[j, L_GAIN2]) * par[P_VBUS_CPV]
    raw = raw + lane[j, L_OFF0 + ch]
    z = lane[j, L_NOISE0 + ch]
    if z != 0.0:
        raw = raw + z * gauss(seed[j], k, ch)
    return np.uint16(min(max(np.rint(raw), 0.0), par[P_FULL]))


@jit
def adc_lanes(par, lane, seed, k, vac, il, vbus, codes):
    """Conversion ``k`` of every lane: ``codes[j] = (vac, il, vbus)`` codes of lane ``j``."""
    for j in range(lane.shape[0]):
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, vac[j])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, il[j])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, vbus[j])
