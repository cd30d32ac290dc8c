"""The HTML report of each command: what goes in its summary, verdict table, plots and texts
(the page itself is ``html.write_html``)."""

from __future__ import annotations

import json
from pathlib import Path

from design.project import Project
from harness.campaigns import sweep_plots
from harness.closedloop import plots, report
from harness.closedloop.loop import RunResult
from harness.closedloop.scenario import Scenario, dumps

from .html import with_plots, write_html


def _config_text(prj: Project) -> tuple[str, str]:
    src = Path(str(prj.config.source))
    text = src.read_text() if src.is_file() else f"(config {src} not readable)"
    return (f"Config {src.name} (digest {prj.config.digest()})", text)


def _pct(x: float | None, digits: int = 2) -> str | None:
    return None if x is None else f"{100 * x:.{digits}f} %"


def run_page(path: str, prj: Project, scn: Scenario, res: RunResult, rep: dict) -> None:
    wr = rep["whole_run"]
    if rep["steady"]:
        ca = rep["class_a_applicable"]
        class_a = (
            (
                "pass" if rep["class_a_pass"] else "FAIL",
                f"worst h{rep['class_a_worst_h']} at "
                f"{rep['class_a_worst_ratio']:.2f} x limit (simulated: not a compliance result)",
            )
            if ca
            else ("n/a", rep["class_a_reason"])
        )
    else:
        class_a = ("n/a", "no steady window")
    rows = [
        ("steady window", "steady" if rep["steady"] else "not steady", rep["steady_reason"]),
        ("IEC 61000-3-2 Class A", *class_a),
        (
            "final mode",
            "ok" if wr["final_mode"] == "run" else wr["final_mode"],
            f"modes seen: {', '.join(wr['modes_seen'])}",
        ),
        ("faults", "ok" if not wr["faults_seen"] else "faults", ", ".join(wr["faults_seen"])),
        (
            "shoot-through periods",
            "ok" if not wr["shoot_through_periods"] else "FAIL",
            str(wr["shoot_through_periods"]),
        ),
        (
            "slow-leg unsafe swaps",
            "ok" if not wr["slow_leg_unsafe_swaps"] else "FAIL",
            str(wr["slow_leg_unsafe_swaps"]),
        ),
    ]
    for ev in rep["events"]:
        settled = ev.get("settled")
        rows.append(
            (
                f"event {ev['kind']} at {ev['t_s']:.3f} s",
                "ok" if settled else "not settled",
                f"settling {ev.get('settling_s')} s, bus {ev.get('vbus_min_V', 0):.1f}.."
                f"{ev.get('vbus_max_V', 0):.1f} V, current peak {ev.get('il_peak_A', 0):.1f} A",
            )
        )
    summary = [
        ("scenario", f"{scn.name} ({rep['model']} model, {scn.duration_s:g} s)"),
        ("config", f"{prj.config.source} (digest {prj.config.digest()})"),
        ("firmware digest", rep["run"]["firmware_digest"]),
        ("PF", None if rep["pf"] is None else f"{rep['pf']:.4f}"),
        ("THD(i), IEC 61000-4-7 groups h2..40", _pct(rep["thd_i"])),
        ("efficiency (modelled losses only)", _pct(rep["efficiency"])),
        (
            "bus mean / ripple pk-pk",
            None
            if rep["vbus_mean_V"] is None
            else f"{rep['vbus_mean_V']:.1f} V / {rep['vbus_ripple_pp_V']:.2f} V",
        ),
        (
            "inductor peak current",
            None if rep["il_peak_A"] is None else f"{rep['il_peak_A']:.2f} A",
        ),
        ("zero-crossing distortion, of rated peak", _pct(rep["zc_spike_of_rated"], 1)),
        (
            "whole run: bus, current peak",
            f"{wr['vbus_min_V']:.1f}..{wr['vbus_max_V']:.1f} V, {wr['il_peak_A']:.2f} A",
        ),
    ]
    images = with_plots(lambda d: plots.write_plots(res, rep, d))
    texts = [
        ("Terminal summary", report.summary_text(rep)),
        _config_text(prj),
        ("Scenario", dumps(scn)),
    ]
    write_html(
        path,
        f"pfcrig run: {scn.name}",
        summary,
        ["check", "verdict", "reason"],
        rows,
        1,
        images,
        texts,
    )


def sweep_page(path: str, prj: Project, recs: list[dict], wall_s: float) -> None:
    rows = []
    for r in recs:
        ok = "steady" if r["steady"] else "not steady"
        rows.append(
            (
                f"{r['vrms_V']:g}",
                f"{100 * r['load_frac']:g}",
                f"{r['freq_Hz']:g}",
                ok,
                None if r["pf"] is None else f"{r['pf']:.4f}",
                _pct(r["thd_i"]),
                _pct(r["efficiency"]),
                (f"{r['class_a_worst_ratio']:.2f}" if r["class_a_applicable"] else "n/a")
                if r["steady"]
                else None,
                _pct(r["zc_spike_of_rated"], 1),
                r["steady_reason"],
            )
        )
    summary = [
        ("config", f"{prj.config.source} (digest {prj.config.digest()})"),
        ("points", len(recs)),
        ("without a steady window", sum(not r["steady"] for r in recs)),
        ("wall time", f"{wall_s:.1f} s"),
    ]
    images = with_plots(lambda d: sweep_plots.write_plots(recs, d))
    head = [
        "V rms",
        "load %",
        "Hz",
        "verdict",
        "PF",
        "THD(i)",
        "efficiency",
        "Class A h/limit",
        "ZC of rated",
        "reason",
    ]
    write_html(
        path,
        f"pfcrig sweep: {Path(str(prj.config.source)).name}",
        summary,
        head,
        rows,
        3,
        images,
        [_config_text(prj)],
    )


def fuzz_page(path: str, prj: Project, res, seed: int) -> None:
    counts = res.counts()
    rows = [
        (
            inv,
            "held" if not counts[inv] else "violated",
            len(res.verdicts) - counts[inv],
            counts[inv],
        )
        for inv in res.names
    ]
    failing = [v for v in res.verdicts if not v.ok]
    summary = [
        ("config", f"{prj.config.source} (digest {prj.config.digest()})"),
        ("cases", len(res.verdicts)),
        ("failing", len(failing)),
        ("seed", seed),
        ("sensor faults", res.sensor_faults),
        ("wall time", f"{res.wall_s:.1f} s"),
    ]
    texts = [
        (
            f"Failing case {j}: " + "; ".join(f"{k}: {m}" for k, m in v.failed.items()),
            json.dumps(v.figures, indent=1, sort_keys=True, default=str),
        )
        for j, v in enumerate(failing[:20])
    ]
    texts.append(_config_text(prj))
    write_html(
        path,
        f"pfcrig fuzz: {Path(str(prj.config.source)).name}",
        summary,
        ["invariant", "verdict", "held", "violated"],
        rows,
        1,
        (),
        texts,
    )


def results_page(path: str, c: dict) -> None:
    rows = [
        (
            k["idx"],
            "ok" if k["ok"] else "fail",
            "; ".join(f"{n}: {m}" for n, m in k["failed"].items()),
        )
        for k in c["cases"]
    ]
    summary = [
        ("campaign", f"{c['id']} ({c['kind']})"),
        ("config", f"{c['config_path']} (digest {c['config_digest']})"),
        ("firmware digest", c["firmware_digest"]),
        ("pfcrig version", c["pfcrig_version"]),
        ("host", c["host"]),
        ("started / finished (UTC)", f"{c['started_utc']} / {c['finished_utc'] or 'not finished'}"),
        ("cases", f"{len(c['cases'])} of {c['planned']}"),
        ("failing", sum(not k["ok"] for k in c["cases"])),
        ("parameters", json.dumps(c["params"], sort_keys=True)),
    ]
    texts = [
        (f"Scenario of failing case {k['idx']}", k["scenario"]) for k in c["cases"] if not k["ok"]
    ][:20]
    write_html(
        path,
        f"pfcrig results: campaign {c['id']}",
        summary,
        ["case", "verdict", "reasons"],
        rows,
        1,
        (),
        texts,
    )
