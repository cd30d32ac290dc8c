"""PNG plots of a sweep: each figure against load with one curve per line voltage, and maps
of PF and THD over line voltage and load; one set per line frequency."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from harness.closedloop.plots import save_png

# (record key, axis label, scale): the figures drawn against load
PANELS = (
    ("pf", "PF", 1.0),
    ("thd_i", "THD(i) %", 100.0),
    ("efficiency", "efficiency %", 100.0),
    ("class_a_worst_ratio", "Class A worst h / limit", 1.0),
    ("zc_spike_of_rated", "zero-crossing distortion, % of rated peak", 100.0),
    ("vbus_ripple_pp_V", "bus ripple V pp", 1.0),
)
MAPS = (("pf", "PF", 1.0), ("thd_i", "THD(i) %", 100.0))


def _value(rec: dict, key: str, scale: float) -> float:
    v = rec.get(key)
    return float("nan") if v is None else float(v) * scale


def write_plots(points: list[dict], out_dir: str | Path) -> list[Path]:
    """The plots of ``points`` (records of ``sweep.sweep``) into ``out_dir``; a point
    without a steady window is left out of the curves and blank on the maps."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths: list[Path] = []
    for f in sorted({p["freq_Hz"] for p in points}):
        at_f = [p for p in points if p["freq_Hz"] == f]
        vrms = sorted({p["vrms_V"] for p in at_f})
        loads = sorted({p["load_frac"] for p in at_f})
        fig, axes = plt.subplots(2, 3, figsize=(13, 7.5), sharex=True)
        for ax, (key, label, scale) in zip(axes.flat, PANELS, strict=True):
            for v in vrms:
                recs = sorted((p for p in at_f if p["vrms_V"] == v), key=lambda p: p["load_frac"])
                x = [100 * p["load_frac"] for p in recs]
                y = [_value(p, key, scale) for p in recs]
                ax.plot(x, y, marker="o", ms=3, label=f"{v:g} V")
            if key == "class_a_worst_ratio":
                ax.axhline(1.0, color="r", lw=0.8, ls="--", label="limit")
            ax.set_ylabel(label, fontsize=8)
            ax.grid(alpha=0.3)
        for ax in axes[-1]:
            ax.set_xlabel("load, % of rated output power", fontsize=8)
        axes.flat[0].legend(fontsize=7, ncol=2)
        fig.suptitle(f"operating range at {f:g} Hz (closed-loop switching runs, steady windows)")
        fig.tight_layout()
        paths.append(out / f"sweep_{f:g}Hz_figures.png")
        save_png(fig, paths[-1])
        plt.close(fig)

        fig, axes = plt.subplots(1, len(MAPS), figsize=(11, 4.2))
        for ax, (key, label, scale) in zip(axes, MAPS, strict=True):
            z = np.full((len(vrms), len(loads)), np.nan)
            for p in at_f:
                z[vrms.index(p["vrms_V"]), loads.index(p["load_frac"])] = _value(p, key, scale)
            im = ax.imshow(z, origin="lower", aspect="auto", cmap="viridis")
            ax.set_xticks(range(len(loads)), [f"{100 * x:g}" for x in loads], fontsize=7)
            ax.set_yticks(range(len(vrms)), [f"{v:g}" for v in vrms], fontsize=7)
            ax.set_xlabel("load %", fontsize=8)
            ax.set_ylabel("line V rms", fontsize=8)
            for (i, j), val in np.ndenumerate(z):
                if np.isfinite(val):
                    ax.text(j, i, f"{val:.3g}", ha="center", va="center", fontsize=6, color="w")
            ax.set_title(label, fontsize=9)
            fig.colorbar(im, ax=ax)
        fig.suptitle(f"maps at {f:g} Hz (blank: no steady window)", fontsize=9)
        fig.tight_layout()
        paths.append(out / f"sweep_{f:g}Hz_maps.png")
        save_png(fig, paths[-1])
        plt.close(fig)
    return paths
