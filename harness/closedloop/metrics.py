"""Figures of merit from recorded waveforms.

* Harmonics by DFT over an IEC 61000-4-7 measurement window: 10 line cycles at
  50 Hz, 12 at 60 Hz (about 200 ms), evaluated at exact multiples of the line
  frequency, h = 1..40, in A rms.
* THD: ``thd_i`` is the total distortion of everything in the sampled current,
  ``sqrt(I_rms^2 - I_1^2)/I_1``; ``thd_i_h40`` the IEC 61000-3-2 style sum over
  h = 2..40.  (A square wave: total 48.34 %, h <= 40 about 47.0 %.)
* PF = P/(V_rms I_rms); displacement factor = cos of the fundamental phase angle.
* IEC 61000-3-2 Class A limits (A rms), quoted from memory, check against the
  standard: odd 3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21,
  15..39: 0.15 x 15/h; even 2: 1.08, 4: 0.43, 6: 0.30, 8..40: 0.23 x 8/h.
"""

from __future__ import annotations

import math

import numpy as np

H_MAX = 40


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
    """(rms amplitudes, phases in rad) of harmonics 1..h_max of ``x`` sampled at ``fs_Hz``.

    ``x`` should span a whole number of line cycles (the window)."""
    x = np.asarray(x, dtype=float)
    t = np.arange(len(x)) / fs_Hz
    h = np.arange(1, h_max + 1)
    basis = np.exp(-2j * np.pi * f_line_Hz * np.outer(h, t))
    c = basis @ x * (2.0 / len(x))
    return np.abs(c) / math.sqrt(2.0), np.angle(c)


def power_quality(v: np.ndarray, i: np.ndarray, fs_Hz: float, f_line_Hz: float) -> dict:
    """PF, THD, displacement factor and harmonics of current ``i`` against voltage ``v``."""
    v = np.asarray(v, dtype=float)
    i = np.asarray(i, dtype=float)
    ih, iph = harmonics_rms(i, fs_Hz, f_line_Hz)
    vh, vph = harmonics_rms(v, fs_Hz, f_line_Hz, 1)
    i_rms = float(np.sqrt(np.mean(i**2)))
    v_rms = float(np.sqrt(np.mean(v**2)))
    p = float(np.mean(v * i))
    i1 = float(ih[0])
    thd = math.sqrt(max(i_rms**2 - i1**2, 0.0)) / i1 if i1 > 0 else math.inf
    thd40 = float(np.sqrt(np.sum(ih[1:] ** 2)) / i1) if i1 > 0 else math.inf
    dpf = math.cos(float(vph[0] - iph[0]))
    pf = p / (v_rms * i_rms) if v_rms * i_rms > 0 else 0.0
    limits = np.array([class_a_limit_A(h) for h in range(2, H_MAX + 1)])
    excess = ih[1:] - limits
    return {
        "pf": pf,
        "thd_i": thd,
        "thd_i_h40": thd40,
        "displacement_factor": dpf,
        "i_rms_A": i_rms,
        "v_rms_V": v_rms,
        "p_in_W": p,
        "harmonics_A": [float(x) for x in ih],
        "class_a_pass": bool(np.all(excess <= 0.0)),
        "class_a_worst_h": int(np.argmax(excess / limits) + 2),
        "class_a_worst_ratio": float(np.max(ih[1:] / limits)),
    }


def window_slice(t_s: np.ndarray, f_line_Hz: float, end_s: float | None = None) -> slice:
    """The last IEC window (whole cycles) ending at ``end_s`` (default: the end of the record)."""
    dt = float(t_s[1] - t_s[0])
    n_win = int(round(window_cycles(f_line_Hz) / f_line_Hz / dt))
    stop = len(t_s) if end_s is None else int(round(end_s / dt))
    return slice(max(stop - n_win, 0), stop)


def bus_figures(vbus: np.ndarray) -> dict:
    return {
        "vbus_mean_V": float(np.mean(vbus)),
        "vbus_ripple_pp_V": float(np.max(vbus) - np.min(vbus)),
        "vbus_min_V": float(np.min(vbus)),
        "vbus_max_V": float(np.max(vbus)),
    }


def zero_crossing_spike(vs: np.ndarray, i_avg: np.ndarray, band_V: float, i1_rms_A: float) -> float:
    """Largest period-average |i| where |v| < band_V, as a fraction of the fundamental peak.

    The period average is the current the line sees through the input filter; a spike
    that matters at the crossing (a wrong-polarity or full-duty period) shows in it."""
    near = np.abs(vs) < band_V
    if not near.any() or i1_rms_A <= 0:
        return 0.0
    return float(np.abs(i_avg[near]).max() / (math.sqrt(2.0) * i1_rms_A))


def half_cycle_mean(x: np.ndarray, fs_Hz: float, f_line_Hz: float) -> np.ndarray:
    """Trailing moving average over one half line period (a comb notch at twice line
    frequency): the bus as the voltage loop sees it, without its ripple."""
    n = max(1, int(round(fs_Hz / (2.0 * f_line_Hz))))
    c = np.cumsum(np.concatenate([[0.0], np.asarray(x, dtype=float)]))
    out = np.empty(len(x))
    k = np.arange(1, len(x) + 1)
    lo = np.maximum(k - n, 0)
    out[:] = (c[k] - c[lo]) / (k - lo)
    return out


def step_response(
    t_s: np.ndarray, v: np.ndarray, t_step: float, ref: float, band: float = 0.02
) -> dict:
    """Over/undershoot (V) and settling time (s, into +-band x ref for good) after ``t_step``."""
    after = t_s >= t_step
    if not after.any():
        return {"overshoot_V": 0.0, "undershoot_V": 0.0, "settling_s": math.nan}
    tt, vv = t_s[after], v[after]
    out = np.abs(vv - ref) > band * ref
    if not out.any():
        settle = 0.0
    elif out[-1]:
        settle = math.inf
    else:
        last = np.nonzero(out)[0][-1]
        settle = float(tt[last + 1] - t_step)
    return {
        "overshoot_V": float(max(vv.max() - ref, 0.0)),
        "undershoot_V": float(max(ref - vv.min(), 0.0)),
        "settling_s": settle,
    }
