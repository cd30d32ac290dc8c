"""``pfcrig design``: sizing and loop tuning, as tables, JSON or Bode plots."""

from __future__ import annotations

import argparse
from pathlib import Path

from codegen.files import atomic_path
from design.project import load_project

from . import checks
from .output import clean, dump_json
from .tables import eng, format_table


def register(sub: argparse._SubParsersAction) -> None:
    q = sub.add_parser("design", help="size the power stage and tune the loops")
    q.add_argument("config")
    q.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    q.add_argument("--plot", metavar="DIR", help="write Bode plots of both loops (PNG) into DIR")
    q.set_defaults(func=design)


def design(args: argparse.Namespace) -> int:
    checks.output_dir(args.plot, "--plot")
    prj = load_project(args.config)
    tun = prj.tuning
    doc = {
        **prj.sizing.as_dict(),
        **{f"resolved_{k}": v for k, v in prj.resolved.as_dict().items()},
    }
    doc["loops"] = tun.as_dict()
    doc["config_digest"] = prj.config.digest()
    if args.plot:
        doc["plots"] = [str(p) for p in bode_plots(tun, args.plot)]
    if args.json:
        dump_json(clean(doc))
        return 0
    print(f"pfcrig design: {prj.config.source} (digest {prj.config.digest()})\n")
    print("Power stage at vin_rms_min, full power")
    print(
        format_table(
            ["quantity", "value", "unit", "formula", "source"],
            [(k, *eng(v, u), f, src) for k, v, u, f, src in prj.sizing.rows()],
        )
    )
    edge = prj.config.control.carrier == "edge"
    sample = (
        "edge-aligned carrier, sample at half the low switch's on-time, the current loop at "
        "its worst point of the line cycle (no main on-time before the sample)"
        if edge
        else "centre-aligned carrier, mid-period sample"
    )
    print(
        f"\nLoops (PI by backward Euler, placed and checked on the exact sampled loop: {sample}, "
        "compare at the next period start; the voltage loop on the sliding half-cycle bus mean)"
    )
    rows = []
    for lp in (tun.current, tun.voltage):
        rows.append(
            (
                lp.name.split("_")[0],
                f"{lp.kp:.5g}",
                f"{lp.ki:.5g}",
                lp.units,
                f"{lp.ts_s * 1e6:.4g}",
                f"{lp.target_crossover_Hz:.4g}",
                f"{lp.crossover_Hz:.4g}",
                f"{lp.target_phase_margin_deg:.1f}",
                f"{lp.phase_margin_deg:.1f}",
                f"{lp.gain_margin_dB:.1f}",
            )
        )
    print(
        format_table(
            [
                "loop",
                "kp",
                "ki (/s)",
                "units",
                "T (us)",
                "fc target (Hz)",
                "fc (Hz)",
                "PM target",
                "PM (deg)",
                "GM (dB)",
            ],
            rows,
        )
    )
    print("\nDerived settings")
    print(
        format_table(
            ["setting", "value", "unit"],
            [(k, *eng(v, _unit_of(k))) for k, v in prj.resolved.as_dict().items()],
        )
    )
    if args.plot:
        print("\nwrote " + ", ".join(doc["plots"]))
    return 0


def _unit_of(name: str) -> str:
    """The unit a ``Resolved`` field's name ends with (``inductance_H`` -> H)."""
    tail = name.rsplit("_", 1)[-1]
    return {"H": "H", "F": "F", "Hz": "Hz", "V": "V", "A": "A", "counts": "counts"}.get(tail, "")


def bode_plots(tun, out_dir: str) -> list[Path]:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for lp in (tun.current, tun.voltage):
        f = np.logspace(np.log10(lp.crossover_Hz) - 2.5, np.log10(0.499 / lp.ts_s), 800)
        g = lp.loop_gain(f)
        fig, (a, b) = plt.subplots(2, 1, figsize=(8, 6), sharex=True)
        a.semilogx(f, 20 * np.log10(np.abs(g)))
        a.axhline(0, color="k", lw=0.6)
        a.axvline(lp.crossover_Hz, color="grey", ls=":")
        a.set_ylabel("loop gain (dB)")
        b.semilogx(f, np.degrees(np.unwrap(np.angle(g))))
        b.axhline(-180, color="k", lw=0.6)
        b.axvline(lp.crossover_Hz, color="grey", ls=":")
        b.set_ylabel("phase (deg)")
        b.set_xlabel("frequency (Hz)")
        kind = lp.name.split("_")[0]
        a.set_title(
            f"{kind} loop: crossover {lp.crossover_Hz:.4g} Hz, phase margin "
            f"{lp.phase_margin_deg:.1f} deg, "
            f"gain margin {lp.gain_margin_dB:.1f} dB"
        )
        fig.tight_layout()
        paths.append(out / f"bode_{kind}.png")
        with atomic_path(paths[-1]) as tmp:
            fig.savefig(tmp, dpi=110, format="png")
        plt.close(fig)
    return paths
