"""``pfcrig loopgain``: the loop gain measured by sine injection in the closed-loop switching
run, against the design's sampled-loop Bode."""

from __future__ import annotations

import argparse
from dataclasses import replace
from pathlib import Path

import numpy as np

from design.project import load_project
from harness.closedloop import loopgain as lg
from harness.closedloop.loop import RECORD_BYTES_PER_PERIOD
from harness.closedloop.scenario import load as load_scenario

from . import checks
from .checks import UsageError
from .output import write_json
from .tables import format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser(
        "loopgain",
        help="measure a loop's gain by sine injection in the closed-loop switching run",
    )
    q.add_argument("config")
    q.add_argument("--loop", choices=["current", "voltage"], required=True)
    q.add_argument(
        "--scenario",
        metavar="FILE",
        help="scenario TOML for the operating point (default: nominal line, rated power, "
        "constant-power load); its events are not allowed",
    )
    q.add_argument(
        "--freqs",
        type=checks.numbers(float, 0.0, 1e7, lo_open=True),
        metavar="LIST",
        help="injection frequencies in Hz, comma-separated (default: 0.35 to 4.2 times the "
        "design's current crossover, 0.4 to 2.2 times the voltage one, off the line harmonics)",
    )
    q.add_argument("--json", metavar="OUT", help="write the measurement as JSON")
    q.add_argument("--plot", metavar="DIR", help="write the measured points over the design Bode")
    q.add_argument("--quiet", action="store_true", help="no progress bar")
    q.set_defaults(func=loopgain_cmd)


def loopgain_cmd(args: argparse.Namespace) -> int:
    checks.output_file(args.json, "--json")
    checks.output_dir(args.plot, "--plot")
    prj = load_project(args.config)
    spec = prj.config.spec
    fs = np.array(args.freqs) if args.freqs else lg.default_points(prj, args.loop)
    nyq = 0.5 * spec.fsw if args.loop == "current" else 0.5 * 8.0 * spec.line_freq
    if fs.max() >= nyq:
        raise UsageError(
            f"--freqs: {fs.max():g} Hz is at or above the {args.loop} loop's Nyquist frequency "
            f"({nyq:g} Hz)"
        )
    scn = lg.default_scenario(prj, args.loop, float(fs.min()))
    if args.scenario:
        given = load_scenario(args.scenario)
        if given.events:
            raise UsageError(
                f"{args.scenario}: a loop-gain measurement needs a steady operating point; "
                "remove its [[event]] tables"
            )
        scn = replace(given, duration_s=max(given.duration_s, scn.duration_s))
    if not args.freqs:  # the gain margin's points at the scenario's operating point
        fs = lg.default_points(prj, args.loop, scn)
    checks.run_length(scn.duration_s, spec.fsw, len(fs) + 1, RECORD_BYTES_PER_PERIOD)
    try:
        res = lg.measure(prj, args.loop, fs, scn, progress=not args.quiet)
    except RuntimeError as exc:
        print(f"pfcrig: {exc}")
        return 1
    doc = res.as_dict()
    rows = [
        (
            f"{p['f_Hz']:.4g}",
            f"{p['gain_dB']:.2f}",
            f"{p['phase_deg']:.1f}",
            f"{p['design_gain_dB']:.2f}",
            f"{p['design_phase_deg']:.1f}",
        )
        for p in doc["points"]
    ]
    print(
        f"{args.loop} loop gain, injected at the {doc['injection']['channel']} channel "
        f"({doc['injection']['amplitude']:.3g} {doc['injection']['unit']}), "
        f"{scn.vrms_V:g} V {scn.freq_Hz:g} Hz, {scn.load_kind} {scn.load_power_W:g} W"
    )
    print(
        format_table(
            ["f (Hz)", "gain (dB)", "phase (deg)", "design gain (dB)", "design phase (deg)"], rows
        )
    )
    d = doc["design"]

    def fmt(v, unit):
        return "not crossed among the points" if v is None else f"{v:.4g} {unit}"

    print(
        f"measured: crossover {fmt(doc['crossover_Hz'], 'Hz')}, phase margin "
        f"{fmt(doc['phase_margin_deg'], 'deg')}, gain margin {fmt(doc['gain_margin_dB'], 'dB')}"
    )
    print(
        f"design:   crossover {fmt(d['crossover_Hz'], 'Hz')}, phase margin "
        f"{fmt(d['phase_margin_deg'], 'deg')}, gain margin {fmt(d['gain_margin_dB'], 'dB')}"
    )
    if args.json:
        write_json(args.json, doc)
    if args.plot:
        path = _plot(prj, res, Path(args.plot))
        print(f"wrote {path}")
    return 0


def _plot(prj, res: lg.LoopGainResult, out: Path) -> Path:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from codegen.files import atomic_path

    lp = lg.design_at(prj, res.loop, res.scenario)
    f = np.logspace(np.log10(res.f_Hz.min()) - 0.5, np.log10(0.499 / lp.ts_s), 600)
    g = lp.loop_gain(f)
    fig, (a, b) = plt.subplots(2, 1, figsize=(8, 6), sharex=True)
    a.semilogx(f, 20 * np.log10(np.abs(g)), label="design (sampled loop)")
    a.semilogx(res.f_Hz, 20 * np.log10(np.abs(res.measured)), "o", label="measured")
    a.axhline(0, color="k", lw=0.6)
    a.set_ylabel("loop gain (dB)")
    a.legend()
    ph = np.degrees(np.unwrap(np.angle(g)))
    b.semilogx(f, ph)
    b.semilogx(res.f_Hz, [lg._deg(x) for x in res.measured], "o")
    b.axhline(-180, color="k", lw=0.6)
    b.set_ylabel("phase (deg)")
    b.set_xlabel("frequency (Hz)")
    fig_ = res.figures()
    pm = fig_["phase_margin_deg"]
    a.set_title(
        f"{res.loop} loop measured in the switching run: crossover "
        f"{fig_['crossover_Hz'] or float('nan'):.4g} Hz, phase margin "
        f"{pm if pm is not None else float('nan'):.1f} deg\n"
        f"design (sampled loop): {lp.crossover_Hz:.4g} Hz, {lp.phase_margin_deg:.1f} deg",
        fontsize=9,
    )
    fig.tight_layout()
    out.mkdir(parents=True, exist_ok=True)
    path = out / f"loopgain_{res.loop}.png"
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
    return path
