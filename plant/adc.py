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
    L_GAIN3,
    L_NOISE0,
    L_OFF0,
    P_FULL,
    P_IL_CPA,
    P_IL_OFF,
    P_LN_CPV,
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
    """Code of channel ``ch`` (0 line voltage V, or L to the bus minus with split sensing;
    1 inductor current A; 2 bus V; 3 N to the bus minus, split sensing) of lane ``j`` in
    conversion ``k``: scaling, gain and offset errors, seeded noise, rounding to the nearest
    code, rails."""
    if ch == 0:
        if par[P_LN_CPV] > 0.0:
            raw = x * (1.0 + lane[j, L_GAIN0]) * par[P_LN_CPV]
        else:
            raw = par[P_VAC_OFF] + x * (1.0 + lane[j, L_GAIN0]) * par[P_VAC_CPV]
    elif ch == 1:
        raw = par[P_IL_OFF] + x * (1.0 + lane[j, L_GAIN1]) * par[P_IL_CPA]
    elif ch == 2:
        raw = x * (1.0 + lane[j, L_GAIN2]) * par[P_VBUS_CPV]
    else:
        raw = x * (1.0 + lane[j, L_GAIN3]) * par[P_LN_CPV]
    raw = raw + lane[j, L_OFF0 + ch]
    z = lane[j, L_NOISE0 + ch]
    if z != 0.0:
        raw = raw + z * gauss(seed[j], k, ch)
    return np.uint16(min(max(np.rint(raw), 0.0), par[P_FULL]))


@jit
def adc_lanes(par, lane, seed, k, vac, il, vbus, codes):
    """Conversion ``k`` of every lane: ``codes[j] = (vac, il, vbus)`` codes of lane ``j``
    (one bipolar line channel)."""
    for j in range(lane.shape[0]):
        codes[j, 0] = adc_channel(par, lane, seed, j, k, 0, vac[j])
        codes[j, 1] = adc_channel(par, lane, seed, j, k, 1, il[j])
        codes[j, 2] = adc_channel(par, lane, seed, j, k, 2, vbus[j])


@jit_inline
def neutral_V(gates, i_A, vterm_V, vbus_V, slow_lo, slow_hi):
    """N to the bus minus at the sample (split sensing): on the bus minus while the slow leg's
    low switch conducts (or, with both slow switches off, its body diode carries a forward
    current), on the bus plus for the high one; with the slow leg off and no current the two
    terminals float about the bus's midpoint (equal node capacitances)."""
    if gates & slow_lo:
        return 0.0
    if gates & slow_hi:
        return vbus_V
    if i_A > 0.0:
        return 0.0
    if i_A < 0.0:
        return vbus_V
    return 0.5 * (vbus_V - vterm_V)
