"""Figures of merit from recorded waveforms: plain functions over arrays, SI units.

* Harmonics over an IEC 61000-4-7 window (10 line cycles at 50 Hz, 12 at 60 Hz, about
  200 ms; the DFT resolution is then 5 Hz): the harmonic group of order h is
  ``G_h^2 = C_{hN-N/2}^2/2 + sum_{|k|<N/2} C_{hN+k}^2 + C_{hN+N/2}^2/2`` over the DFT bins
  ``C`` (rms) of a window of N cycles (IEC 61000-4-7, harmonic subgroups and groups, from
  memory of the standard).
* ``thd_i``: sqrt(sum_{h=2..40} G_h^2)/G_1 (the group THD, the headline); ``thd_total``:
  everything in the current but the fundamental and DC, sqrt(I_rms^2 - I_dc^2 - I_1^2)/I_1;
  ``dc_A``: the mean.  (A square wave: total 48.34 %, h <= 40 about 47.0 %.)
* PF = P/(V_rms I_rms); displacement factor = cos of the fundamental phase angle.
* IEC 61000-3-2 Class A limits (A rms), quoted from memory, check against the standard:
  odd 3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21, 15..39: 0.15 x 15/h;
  even 2: 1.08, 4: 0.43, 6: 0.30, 8..40: 0.23 x 8/h.  In scope only for an input of at
  most 16 A per phase on a 220..240 V line (the limits are defined at 230 V).
"""

from __future__ import annotations

import math

import numpy as np

H_MAX = 40
CLASS_A_LINE_V = (220.0, 240.0)  # line rms the Class A limits are defined for (230 V nominal)
CLASS_A_MAX_INPUT_A = 16.0  # IEC 61000-3-2 scope: input current up to 16 A per phase
ZC_REGION_OF_PEAK = 0.25  # zero-crossing region: |v| below this fraction of the line peak


def class_a_limit_A(h: int) -> float:
    """IEC 61000-3-2 Class A limit for harmonic ``h`` (A rms); from memory of the standard."""
    table = {2: 1.08, 3: 2.30, 4: 0.43, 5: 1.14, 6: 0.30, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21}
    if h in table:
        return table[h]
    if h % 2 == 1 and 15 <= h <= 39:
        return 0.15 * 15.0 / h
    if h % 2 == 0 and 8 <= h <= 40:
        return 0.23 * 8.0 / h
    raise ValueError(f"no Class A limit for h = {h}")


def window_cycles(f_line_Hz: float) -> int:
    """IEC 61000-4-7 window length in cycles: 10 for a 50 Hz system, 12 for 60 Hz."""
    return 12 if f_line_Hz > 55.0 else 10


def harmonics_rms(
    x: np.ndarray, fs_Hz: float, f_line_Hz: float, h_max: int = H_MAX
) -> tuple[np.ndarray, np.ndarray]:
    """(rms amplitudes, phases in rad) of harmonics 1..h_max of ``x`` sampled at ``fs_Hz``,
    by a DFT at exact multiples of ``f_line_Hz``; ``x`` should span whole line cycles."""
    x = np.asarray(x, dtype=float)
    t = np.arange(len(x)) / fs_Hz
    h = np.arange(1, h_max + 1)
    c = np.exp(-2j * np.pi * f_line_Hz * np.outer(h, t)) @ x * (2.0 / len(x))
    return np.abs(c) / math.sqrt(2.0), np.angle(c)


def harmonic_groups(x: np.ndarray, cycles: int, h_max: int = H_MAX) -> np.ndarray:
    """IEC 61000-4-7 harmonic groups G_1..G_h_max (A rms) of a window of ``cycles`` whole
    line cycles (bins of the DFT every f_line/cycles; the half-weighted edge bins shared
    with the next group)."""
    x = np.asarray(x, dtype=float)
    n = len(x)
    c = np.abs(np.fft.rfft(x)) / n * 2.0 / math.sqrt(2.0)  # rms of each bin but DC
    half = cycles // 2
    need = h_max * cycles + half + 1
    if len(c) < need:
        c = np.concatenate([c, np.zeros(need - len(c))])
    out = np.empty(h_max)
    for h in range(1, h_max + 1):
        k = h * cycles
        inner = np.sum(c[k - half + 1 : k + half] ** 2)
        out[h - 1] = math.sqrt(inner + 0.5 * c[k - half] ** 2 + 0.5 * c[k + half] ** 2)
    return out


def power_quality(
    v: np.ndarray, i: np.ndarray, fs_Hz: float, f_line_Hz: float, cycles: int | None = None
) -> dict:
    """PF, displacement factor, THD (groups and total), DC and harmonic groups of current
    ``i`` (A) against voltage ``v`` (V) over a window of ``cycles`` whole line cycles."""
    v, i = np.asarray(v, dtype=float), np.asarray(i, dtype=float)
    cycles = window_cycles(f_line_Hz) if cycles is None else cycles
    groups = harmonic_groups(i, cycles)
    ih, iph = harmonics_rms(i, fs_Hz, f_line_Hz, 1)
    _, vph = harmonics_rms(v, fs_Hz, f_line_Hz, 1)
    i_rms, v_rms = float(np.sqrt(np.mean(i**2))), float(np.sqrt(np.mean(v**2)))
    dc = float(np.mean(i))
    i1 = float(ih[0])
    p = float(np.mean(v * i))
    rest = max(i_rms**2 - dc**2 - i1**2, 0.0)
    return {
        "pf": p / (v_rms * i_rms) if v_rms * i_rms > 0 else 0.0,
        "displacement_factor": math.cos(float(vph[0] - iph[0])),
        "thd_i": float(np.sqrt(np.sum(groups[1:] ** 2)) / groups[0]) if groups[0] > 0 else math.inf,
        "thd_total": math.sqrt(rest) / i1 if i1 > 0 else math.inf,
        "dc_A": dc,
        "i_rms_A": i_rms,
        "v_rms_V": v_rms,
        "p_line_W": p,
        "i1_rms_A": i1,
        "harmonics_A": [float(x) for x in groups],
    }


def class_a(groups_A: list[float], v_rms_V: float, i_rms_A: float) -> dict:
    """IEC 61000-3-2 Class A verdict of harmonic groups 1..40, or why it does not apply;
    ``margins_pct[h]`` = 100 (1 - G_h/limit) (negative: over the limit)."""
    lo, hi = CLASS_A_LINE_V
    reason = ""
    if not lo <= v_rms_V <= hi:
        reason = (
            f"line {v_rms_V:.1f} V rms is outside {lo:g}..{hi:g} V (the Class A limits "
            "are defined at 230 V)"
        )
    elif i_rms_A > CLASS_A_MAX_INPUT_A:
        reason = (
            f"input {i_rms_A:.2f} A rms exceeds {CLASS_A_MAX_INPUT_A:g} A per phase "
            "(outside IEC 61000-3-2; IEC 61000-3-12 covers it)"
        )
    if reason:
        return {
            "class_a_applicable": False,
            "class_a_reason": reason,
            "class_a_pass": None,
            "class_a_worst_h": None,
            "class_a_worst_ratio": None,
            "class_a_margins_pct": None,
        }
    limits = np.array([class_a_limit_A(h) for h in range(2, H_MAX + 1)])
    ratio = np.asarray(groups_A[1:]) / limits
    return {
        "class_a_applicable": True,
        "class_a_reason": "",
        "class_a_pass": bool(np.all(ratio <= 1.0)),
        "class_a_worst_h": int(np.argmax(ratio) + 2),
        "class_a_worst_ratio": float(np.max(ratio)),
        "class_a_margins_pct": {
            str(h): float(100.0 * (1.0 - r))
            for h, r in zip(range(2, H_MAX + 1), ratio, strict=True)
        },
    }


def zero_crossing_distortion(
    v: np.ndarray, i: np.ndarray, fs_Hz: float, f_line_Hz: float, rated_peak_A: float
) -> tuple[float, float]:
    """(A, fraction of ``rated_peak_A``): the largest deviation of the period-average line
    current from the window's fundamental component where |v| is below
    ``ZC_REGION_OF_PEAK`` of the line peak (the blanking, the duty ramp and the
    synchronous switch's re-enable all act inside it).  An ideal sinusoid scores 0."""
    v, i = np.asarray(v, dtype=float), np.asarray(i, dtype=float)
    amp, ph = harmonics_rms(i, fs_Hz, f_line_Hz, 1)
    t = np.arange(len(i)) / fs_Hz
    # c = 2/N sum x exp(-j w t) = A exp(j phi) for x = A cos(w t + phi)
    fund = math.sqrt(2.0) * amp[0] * np.cos(2 * np.pi * f_line_Hz * t + ph[0])
    near = np.abs(v) < ZC_REGION_OF_PEAK * np.max(np.abs(v))
    if not near.any():
        return 0.0, 0.0
    dev = float(np.max(np.abs(i[near] - fund[near])))
    return dev, dev / rated_peak_A


def bus_figures(vbus: np.ndarray) -> dict:
    return {
        "vbus_mean_V": float(np.mean(vbus)),
        "vbus_ripple_pp_V": float(np.max(vbus) - np.min(vbus)),
        "vbus_min_V": float(np.min(vbus)),
        "vbus_max_V": float(np.max(vbus)),
    }


def half_cycle_mean(x: np.ndarray, fs_Hz: float, f_line_Hz: float) -> np.ndarray:
    """Trailing moving average over one half line period (a comb notch at twice line
    frequency): the bus as the voltage loop sees it, without its ripple."""
    n = max(1, int(round(fs_Hz / (2.0 * f_line_Hz))))
    c = np.cumsum(np.concatenate([[0.0], np.asarray(x, dtype=float)]))
    k = np.arange(1, len(x) + 1)
    lo = np.maximum(k - n, 0)
    return (c[k] - c[lo]) / (k - lo)


def step_response(
    t_s: np.ndarray,
    v: np.ndarray,
    t_step: float,
    ref: float,
    band: float = 0.02,
    t_end: float = math.inf,
) -> dict:
    """Over/undershoot (V) of ``v`` against ``ref`` and settling time (s, into +-band x ref
    for good) between ``t_step`` and ``t_end``; ``settled`` False when it is still outside
    the band at ``t_end``."""
    sel = (t_s >= t_step) & (t_s < t_end)
    if not sel.any():
        return {"overshoot_V": 0.0, "undershoot_V": 0.0, "settling_s": math.nan, "settled": False}
    tt, vv = t_s[sel], v[sel]
    out = np.abs(vv - ref) > band * ref
    if not out.any():
        settle = 0.0
    elif out[-1]:
        settle = math.inf
    else:
        settle = float(tt[np.nonzero(out)[0][-1] + 1] - t_step)
    return {
        "overshoot_V": float(max(vv.max() - ref, 0.0)),
        "undershoot_V": float(max(ref - vv.min(), 0.0)),
        "settling_s": settle,
        "settled": bool(math.isfinite(settle)),
    }
