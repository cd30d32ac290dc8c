"""Reports of a closed-loop run: JSON figures, terminal summary, CSV, PNG plots."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from design.contract import Fault, Mode
from design.sizing import boost_ripple_pp

from . import metrics
from .loop import RunResult

MODE_NAMES = [m.name.lower() for m in Mode]
FAULT_NAMES = [f.name.lower() for f in Fault]


def mode_name(code: int) -> str:
    """The mode's name, or ``unknown_N`` for a code the contract does not define."""
    return MODE_NAMES[code] if 0 <= code < len(MODE_NAMES) else f"unknown_{code}"


def fault_names(bits: int) -> list[str]:
    return [f.name.lower() for f in Fault if bits & f]


def lane_report(res: RunResult, k: int = 0) -> dict:
    """Figures of lane ``k``; steady-state figures over the last IEC 61000-4-7 window."""
    prj = res.project
    spec = prj.config.spec
    scn = res.scenarios[k]
    d = res.lane(k)
    fs = spec.fsw
    t = d["t_s"]
    f_line = scn.freq_Hz
    for ev in scn.events:
        if ev.kind == "freq":
            f_line = ev.get("hz")
    w = metrics.window_slice(t, f_line)
    pq = metrics.power_quality(d["vs_V"][w], d["i_avg_A"][w], fs, f_line)
    bus = metrics.bus_figures(d["vbus_V"][w])
    e_out = float(np.sum(d["e_out_J"][w]))
    e_loss = float(np.sum(d["e_loss_J"][w]))
    p_out = e_out / (len(t[w]) / fs)
    # inductor ripple at the line peak, against v(1 - v/Vo)/(L fsw)
    vs_w = d["vs_V"][w]
    near_peak = np.abs(vs_w) >= 0.995 * np.max(np.abs(vs_w))
    rip = (d["i_max_A"][w] - d["i_min_A"][w])[near_peak]
    v_pk = float(np.mean(np.abs(vs_w[near_peak])))
    rip_formula = boost_ripple_pp(v_pk, bus["vbus_mean_V"], prj.resolved.inductance_H, fs)
    c_bus = prj.resolved.capacitance_F
    bus_formula = (
        p_out / (2 * math.pi * f_line * c_bus * bus["vbus_mean_V"])
        if bus["vbus_mean_V"] > 0
        else math.nan
    )
    modes = d["mode"].astype(int)
    faults_seen = int(np.bitwise_or.reduce(d["faults"].astype(int)))
    il_abs = np.maximum(np.abs(d["i_max_A"]), np.abs(d["i_min_A"]))
    rep = {
        "scenario": scn.name,
        "model": res.model,
        **{
            k2: pq[k2]
            for k2 in (
                "pf",
                "thd_i",
                "thd_i_h40",
                "displacement_factor",
                "harmonics_A",
                "class_a_pass",
                "class_a_worst_h",
                "class_a_worst_ratio",
                "i_rms_A",
                "v_rms_V",
                "p_in_W",
            )
        },
        **bus,
        "vbus_ref_V": spec.vout,
        "il_peak_A": float(il_abs[w].max()),
        "efficiency": e_out / (e_out + e_loss) if e_out > 0 else math.nan,
        "p_out_W": p_out,
        "il_ripple_at_peak_A": float(np.mean(rip)) if len(rip) else math.nan,
        "il_ripple_formula_A": rip_formula,
        "vbus_ripple_formula_V": bus_formula,
        "zc_spike_ratio": metrics.zero_crossing_spike(
            d["vs_V"][w], d["i_avg_A"][w], 2.0 * prj.resolved.zc_blank_V, pq["harmonics_A"][0]
        ),
        "window_s": [float(t[w][0]), float(t[w][-1] + 1.0 / fs)],
        "whole_run": {
            "duration_s": float(t[-1] + 1.0 / fs),
            "vbus_min_V": float(d["vbus_V"].min()),
            "vbus_max_V": float(d["vbus_V"].max()),
            "il_peak_A": float(il_abs.max()),
            "final_mode": mode_name(int(modes[-1])),
            "modes_seen": sorted({mode_name(int(m)) for m in np.unique(modes)}),
            "faults_seen": fault_names(faults_seen),
            "shoot_through_periods": int(np.sum(d["shoot_through"])),
        },
        "events": [],
    }
    smooth = metrics.half_cycle_mean(d["vbus_V"], fs, scn.freq_Hz)
    for ev in scn.events:
        info = {"t_s": ev.t_s, "kind": ev.kind, **dict(ev.values)}
        after = t >= ev.t_s
        if after.any():
            # over/undershoot and settling of the half-cycle mean bus (ripple removed)
            info.update(metrics.step_response(t, smooth, ev.t_s, spec.vout))
            info["vbus_min_after_V"] = float(d["vbus_V"][after].min())
            info["vbus_max_after_V"] = float(d["vbus_V"][after].max())
            info["il_peak_after_A"] = float(il_abs[after].max())
        rep["events"].append(info)
    return rep


def summary_text(rep: dict) -> str:
    ok = (
        "pass"
        if rep["class_a_pass"]
        else f"FAIL (h{rep['class_a_worst_h']} at {rep['class_a_worst_ratio']:.2f} x limit)"
    )
    wr = rep["whole_run"]
    lines = [
        f"scenario {rep['scenario']} ({rep['model']} model), window "
        f"{rep['window_s'][0]:.3f}..{rep['window_s'][1]:.3f} s",
        f"  PF {rep['pf']:.4f}   THD(i) {100 * rep['thd_i']:.2f} %  (h<=40: "
        f"{100 * rep['thd_i_h40']:.2f} %)   "
        f"displacement {rep['displacement_factor']:.4f}   Class A {ok}",
        f"  line {rep['v_rms_V']:.1f} V rms, {rep['i_rms_A']:.2f} A rms, {rep['p_in_W']:.0f} W in, "
        f"{rep['p_out_W']:.0f} W out, efficiency {100 * rep['efficiency']:.2f} % (conduction "
        "losses only)",
        f"  bus mean {rep['vbus_mean_V']:.2f} V (ref {rep['vbus_ref_V']:.0f}), ripple "
        f"{rep['vbus_ripple_pp_V']:.2f} V pp "
        f"(formula {rep['vbus_ripple_formula_V']:.2f}), min {rep['vbus_min_V']:.1f}, max "
        f"{rep['vbus_max_V']:.1f} V",
        f"  inductor peak {rep['il_peak_A']:.2f} A, ripple at line peak "
        f"{rep['il_ripple_at_peak_A']:.2f} A pp "
        f"(formula {rep['il_ripple_formula_A']:.2f}), zero-crossing spike "
        f"{100 * rep['zc_spike_ratio']:.1f} % of peak",
        f"  whole run: bus {wr['vbus_min_V']:.1f}..{wr['vbus_max_V']:.1f} V, current peak "
        f"{wr['il_peak_A']:.2f} A, "
        f"final mode {wr['final_mode']}, faults seen: {', '.join(wr['faults_seen']) or 'none'}",
    ]
    for ev in rep["events"]:
        extra = {k: v for k, v in ev.items() if k not in ("t_s", "kind")}
        lines.append(
            f"  event {ev['kind']} at {ev['t_s']:.3f} s: "
            + ", ".join(
                f"{k} {v:.4g}" if isinstance(v, float) else f"{k} {v}" for k, v in extra.items()
            )
        )
    return "\n".join(lines)


def write_csv(res: RunResult, path: str | Path, k: int = 0) -> None:
    cols = [
        "t_s",
        "vs_V",
        "vterm_V",
        "i_avg_A",
        "i_max_A",
        "i_min_A",
        "vbus_V",
        "duty",
        "iref_A",
        "vref_V",
        "pcmd_W",
        "compare",
        "gates",
        "mode",
        "faults",
    ]
    d = res.lane(k)
    with open(path, "w", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(cols)
        for row in zip(*(d[c] for c in cols), strict=True):
            wr.writerow([f"{x:.6g}" for x in row])
