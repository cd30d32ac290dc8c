"""Reports of a closed-loop run: the JSON figures (keys documented in the README), the
terminal summary and the CSV of per-period waveforms."""

from __future__ import annotations

import csv
import hashlib
import math
from pathlib import Path

import numpy as np

from codegen.render import VERSION, render
from design.contract import Fault, Gate, Mode
from design.project import Project
from design.rules import SLOW_OFF_MIN_PERIODS, SLOW_SWAP_OF_PEAK
from design.sizing import boost_ripple_pp

from . import metrics
from .loop import RunResult
from .power import power_balance
from .windows import SETTLE_BAND, Window, event_windows, steady_window

MODE_NAMES = [m.name.lower() for m in Mode]
DCM_WARN_FRACTION = 0.30  # averaged model: warn above this share of gated periods in DCM (README)
CSV_COLUMNS = [
    "t_s",
    "vs_V",
    "vterm_V",
    "i_avg_A",
    "i_line_A",
    "i_max_A",
    "i_min_A",
    "vbus_V",
    "vc_V",
    "i_end_A",
    "duty",
    "iref_A",
    "vref_V",
    "pcmd_W",
    "compare",
    "gates",
    "mode",
    "faults",
    "e_in_J",
    "e_out_J",
    "e_loss_J",
    "e_esr_J",
    "i2_A2s",
    "e_term_J",
    "e_filt_J",
    "e_fstore_J",
]
QUALITY_KEYS = (
    "pf",
    "thd_i",
    "thd_total",
    "dc_A",
    "displacement_factor",
    "harmonics_A",
    "i_rms_A",
    "v_rms_V",
)
STEADY_KEYS = (
    *QUALITY_KEYS,
    "class_a_applicable",
    "class_a_reason",
    "class_a_pass",
    "class_a_worst_h",
    "class_a_worst_ratio",
    "class_a_margins_pct",
    "vbus_mean_V",
    "vbus_ripple_pp_V",
    "vbus_min_V",
    "vbus_max_V",
    "il_peak_A",
    "il_ripple_at_peak_A",
    "il_ripple_formula_A",
    "vbus_ripple_formula_V",
    "zc_spike_A",
    "zc_spike_of_rated",
    "p_in_W",
    "p_source_W",
    "p_out_W",
    "efficiency",
    "losses_W",
    "losses_not_modelled",
    "stored_change_W",
    "balance_residual_W",
)
_DIGESTS: dict[str, str] = {}


def mode_name(code: int) -> str:
    """The mode's name, or ``unknown_N`` for a code the contract does not define."""
    return MODE_NAMES[code] if 0 <= code < len(MODE_NAMES) else f"unknown_{code}"


def fault_names(bits: int) -> list[str]:
    return [f.name.lower() for f in Fault if bits & f]


def firmware_digest(prj: Project) -> str:
    """SHA-256 (16 hex digits) of the generated controller sources."""
    key = prj.config.digest() + prj.config.control.number_format
    if key not in _DIGESTS:
        files = render(prj)
        h = hashlib.sha256()
        for name in sorted(files):
            h.update(name.encode() + b"\0" + files[name].encode() + b"\0")
        _DIGESTS[key] = h.hexdigest()[:16]
    return _DIGESTS[key]


def provenance(res: RunResult, k: int) -> dict:
    prj, scn = res.project, res.scenarios[k]
    return {
        "config_path": prj.config.source,
        "config_digest": prj.config.digest(),
        "scenario": scn.name,
        "scenario_path": scn.path or "default",
        "model": res.model,
        "pfcrig_version": VERSION,
        "firmware_digest": firmware_digest(prj),
    }


def _steady_figures(d: dict, prj: Project, win: Window) -> dict:
    fs, sl = prj.config.spec.fsw, win.slice(prj.config.spec.fsw)
    # power quality on the grid's current (the X capacitor's reactive current included); the
    # zero-crossing distortion on the stage's own (where the crossing handling acts)
    vs, i, i_line = d["vs_V"][sl], d["i_avg_A"][sl], d["i_line_A"][sl]
    pq = metrics.power_quality(vs, i_line, fs, win.freq_Hz, win.cycles)
    out = {k: pq[k] for k in QUALITY_KEYS}
    out.update(metrics.class_a(pq["harmonics_A"], pq["v_rms_V"], pq["i_rms_A"]))
    bus = metrics.bus_figures(d["vbus_V"][sl])
    out.update(bus)
    pw = power_balance(d, prj, sl)
    out.update(pw)
    near_peak = np.abs(vs) >= 0.995 * np.max(np.abs(vs))
    v_pk = float(np.mean(np.abs(vs[near_peak])))
    il = np.maximum(np.abs(d["i_max_A"][sl]), np.abs(d["i_min_A"][sl]))
    out["il_peak_A"] = float(il.max())
    out["il_ripple_at_peak_A"] = float(np.mean((d["i_max_A"][sl] - d["i_min_A"][sl])[near_peak]))
    vo, C = bus["vbus_mean_V"], prj.resolved.capacitance_F
    # the textbook relation at each of those periods' own stage input and bus voltage
    v_at, vo_at = np.abs(d["vterm_V"][sl][near_peak]), d["vbus_V"][sl][near_peak]
    out["il_ripple_formula_A"] = (
        float(
            np.mean(
                [
                    boost_ripple_pp(v, b, prj.resolved.inductance_H, fs)
                    for v, b in zip(v_at, vo_at, strict=True)
                ]
            )
        )
        if v_pk < vo
        else None
    )
    out["vbus_ripple_formula_V"] = pw["p_out_W"] / (2 * math.pi * win.freq_Hz * C * vo)
    out["zc_spike_A"], out["zc_spike_of_rated"] = metrics.zero_crossing_distortion(
        vs, i, fs, win.freq_Hz, prj.sizing.iline_peak_A
    )
    return out


def _events(d: dict, res: RunResult, k: int, smooth: np.ndarray, il_abs: np.ndarray) -> list:
    scn, t, vout = res.scenarios[k], d["t_s"], res.project.config.spec.vout
    duration = float(t[-1] + 1.0 / res.project.config.spec.fsw)
    out = []
    for ev, (a, b) in zip(scn.events, event_windows(scn, duration), strict=True):
        info = {
            "t_s": ev.t_s,
            "kind": ev.kind,
            **dict(ev.words),
            **dict(ev.values),
            "window_s": [a, b],
            "band": SETTLE_BAND,
        }
        sel = (t >= a) & (t < b)
        if sel.any():
            info.update(metrics.step_response(t, smooth, a, vout, SETTLE_BAND, b))
            info["vbus_min_V"] = float(d["vbus_V"][sel].min())
            info["vbus_max_V"] = float(d["vbus_V"][sel].max())
            info["il_peak_A"] = float(il_abs[sel].max())
        out.append(info)
    return out


def dcm_fraction(d: dict, prj: Project) -> float:
    """Share of the gated periods whose average current is below half the CCM ripple
    v(1 - v/Vo)/(L fsw) there: discontinuous conduction (or, with the synchronous switch,
    current reversal within the period), by the boost CCM/DCM boundary of Erickson &
    Maksimovic, ch. 5 (the period average against half the ripple)."""
    gated = d["gates"] != 0
    if not gated.any():
        return 0.0
    v, vo = np.abs(d["vterm_V"]), np.maximum(d["vbus_V"], 1.0)
    ripple = v * np.clip(1.0 - v / vo, 0.0, 1.0) / (prj.resolved.inductance_H * prj.config.spec.fsw)
    dcm = gated & (np.abs(d["i_avg_A"]) < 0.5 * ripple)
    return float(np.sum(dcm) / np.sum(gated))


def _warnings(d: dict, res: RunResult, dcm: float) -> list[str]:
    out = []
    if res.model == "averaged" and dcm > DCM_WARN_FRACTION:
        out.append(
            f"averaged model: {100 * dcm:.0f} % of the switching periods are in "
            f"discontinuous conduction (more than {100 * DCM_WARN_FRACTION:.0f} %); its "
            "light-load and zero-crossing figures are rough there: use the switching model"
        )
    return out


def unsafe_swaps(d: dict[str, np.ndarray], prj: Project) -> int:
    """Slow-leg role changes (slow low on, then slow high on, or back) with fewer than
    SLOW_OFF_MIN_PERIODS periods of both off between them, or with the real current above
    SLOW_SWAP_OF_PEAK of the sized peak when the new switch turns on."""
    g = d["gates"].astype(int)
    slow = np.where(g & Gate.SLOW_LO, 1, np.where(g & Gate.SLOW_HI, -1, 0))
    idx = np.flatnonzero(slow)
    if len(idx) < 2:
        return 0
    change = np.flatnonzero(np.diff(slow[idx]) != 0) + 1
    k_new, k_old = idx[change], idx[change - 1]
    gap = k_new - k_old - 1
    i_at = np.abs(d["i_end_A"][np.maximum(k_new - 1, 0)])
    bad = (gap < SLOW_OFF_MIN_PERIODS) | (i_at > SLOW_SWAP_OF_PEAK * prj.sizing.iline_peak_A)
    return int(bad.sum())


def lane_report(res: RunResult, k: int = 0) -> dict:
    """Every figure of lane ``k``: steady-state figures over the steady window (``None`` when
    there is none, with the reason), each event over its own window, the whole run."""
    prj, scn, d = res.project, res.scenarios[k], res.lane(k)
    spec = prj.config.spec
    t = d["t_s"]
    win = steady_window(t, d["vs_V"], d["mode"].astype(int), d["vbus_V"], scn, spec.vout, spec.fsw)
    rep: dict = {
        "run": provenance(res, k),
        "scenario": scn.name,
        "model": res.model,
        "steady": win.steady,
        "steady_reason": win.reason,
        "window_s": [win.start_s, win.end_s] if win.steady else None,
        "vbus_ref_V": spec.vout,
    }
    rep.update(_steady_figures(d, prj, win) if win.steady else dict.fromkeys(STEADY_KEYS))
    smooth = metrics.half_cycle_mean(d["vbus_V"], spec.fsw, win.freq_Hz)
    il_abs = np.maximum(np.abs(d["i_max_A"]), np.abs(d["i_min_A"]))
    modes = d["mode"].astype(int)
    dcm = dcm_fraction(d, prj)
    rep["warnings"] = _warnings(d, res, dcm)
    rep["whole_run"] = {
        "duration_s": float(t[-1] + 1.0 / spec.fsw),
        "vbus_min_V": float(d["vbus_V"].min()),
        "vbus_max_V": float(d["vbus_V"].max()),
        "il_peak_A": float(il_abs.max()),
        "final_mode": mode_name(int(modes[-1])),
        "modes_seen": sorted({mode_name(int(m)) for m in np.unique(modes)}),
        "faults_seen": fault_names(int(np.bitwise_or.reduce(d["faults"].astype(int)))),
        "shoot_through_periods": int(np.sum(d["shoot_through"])),
        "slow_leg_unsafe_swaps": unsafe_swaps(d, prj),
        "dcm_fraction": dcm,
    }
    rep["events"] = _events(d, res, k, smooth, il_abs)
    return rep


def _fmt(x, spec: str, scale: float = 1.0) -> str:
    return "n/a" if x is None else format(x * scale, spec)


def _steady_lines(rep: dict) -> list[str]:
    if not rep["steady"]:
        return [f"  not steady: {rep['steady_reason']}"]
    if rep["class_a_applicable"]:
        verdict = (
            "pass"
            if rep["class_a_pass"]
            else (f"FAIL (h{rep['class_a_worst_h']} at {rep['class_a_worst_ratio']:.2f} x limit)")
        )
        ca = f"Class A {verdict} (simulated: not a compliance result)"
    else:
        ca = f"Class A not applicable: {rep['class_a_reason']}"
    losses = ", ".join(f"{k} {v:.2f}" for k, v in rep["losses_W"].items())
    return [
        f"  PF {rep['pf']:.4f}   THD(i) {100 * rep['thd_i']:.2f} % (IEC 61000-4-7 groups, "
        f"h 2..40; total {100 * rep['thd_total']:.2f} %)   DC {rep['dc_A']:.3f} A   "
        f"displacement {rep['displacement_factor']:.4f}",
        f"  {ca}",
        f"  line {rep['v_rms_V']:.1f} V rms, {rep['i_rms_A']:.2f} A rms; at the stage's terminals "
        f"{rep['p_in_W']:.1f} W in, {rep['p_out_W']:.1f} W out, efficiency "
        f"{_fmt(rep['efficiency'], '.2f', 100)} % (losses W: {losses}"
        + (
            f"; not modelled: {', '.join(rep['losses_not_modelled'])})"
            if rep["losses_not_modelled"]
            else ")"
        ),
        f"  bus mean {rep['vbus_mean_V']:.2f} V (ref {rep['vbus_ref_V']:.0f}), ripple "
        f"{rep['vbus_ripple_pp_V']:.2f} V pp (P/(2 pi f C Vo): "
        f"{rep['vbus_ripple_formula_V']:.2f}), min {rep['vbus_min_V']:.1f}, max "
        f"{rep['vbus_max_V']:.1f} V",
        f"  inductor peak {rep['il_peak_A']:.2f} A, ripple at line peak "
        f"{rep['il_ripple_at_peak_A']:.2f} A pp (v(1-v/Vo)/(L fsw): "
        f"{_fmt(rep['il_ripple_formula_A'], '.2f')}), zero-crossing distortion "
        f"{rep['zc_spike_A']:.2f} A = {100 * rep['zc_spike_of_rated']:.1f} % of rated peak",
    ]


def summary_text(rep: dict) -> str:
    wr = rep["whole_run"]
    win = rep["window_s"]
    head = f"scenario {rep['scenario']} ({rep['model']} model)"
    head += f", window {win[0]:.3f}..{win[1]:.3f} s" if win else ""
    lines = [head, *_steady_lines(rep)]
    lines.append(
        f"  whole run: bus {wr['vbus_min_V']:.1f}..{wr['vbus_max_V']:.1f} V, current peak "
        f"{wr['il_peak_A']:.2f} A, final mode {wr['final_mode']}, faults seen: "
        f"{', '.join(wr['faults_seen']) or 'none'}, shoot-through periods "
        f"{wr['shoot_through_periods']}"
    )
    for ev in rep["events"]:
        extra = {k: v for k, v in ev.items() if k not in ("t_s", "kind", "window_s", "band")}
        lines.append(
            f"  event {ev['kind']} at {ev['t_s']:.3f} s (to {ev['window_s'][1]:.3f} s): "
            + ", ".join(
                f"{k} {v:.4g}" if isinstance(v, float) else f"{k} {v}" for k, v in extra.items()
            )
        )
    lines += [f"  warning: {w}" for w in rep["warnings"]]
    return "\n".join(lines)


def write_csv(res: RunResult, path: str | Path, k: int = 0) -> None:
    d = res.lane(k)
    with open(path, "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(CSV_COLUMNS)
        for row in zip(*(d[c] for c in CSV_COLUMNS), strict=True):
            wr.writerow([f"{x:.10g}" for x in row])
