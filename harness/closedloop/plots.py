"""PNG plots of a closed-loop run: line voltage and current, bus/duty/mode, harmonics
against the IEC 61000-3-2 Class A limits."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from codegen.files import atomic_path

from . import metrics
from .loop import RunResult
from .report import MODE_NAMES


def write_plots(res: RunResult, rep: dict, out_dir: str | Path, k: int = 0) -> list[Path]:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    d = res.lane(k)
    t = d["t_s"]
    paths = []

    # the last three cycles of the steady window, or of the run when there is none
    w1 = rep["window_s"][1] if rep["window_s"] else float(t[-1])
    sel = (t >= w1 - 3.0 / res.scenarios[k].freq_Hz) & (t < w1)
    fig, ax = plt.subplots(figsize=(10, 4))
    ax.plot(t[sel] * 1e3, d["vs_V"][sel], color="tab:blue", lw=1, label="line voltage")
    ax.set_xlabel("time (ms)")
    ax.set_ylabel("line voltage (V)", color="tab:blue")
    ax2 = ax.twinx()
    ax2.plot(
        t[sel] * 1e3,
        d["i_max_A"][sel],
        color="tab:orange",
        lw=0.5,
        alpha=0.5,
        label="inductor current envelope",
    )
    ax2.plot(t[sel] * 1e3, d["i_min_A"][sel], color="tab:orange", lw=0.5, alpha=0.5)
    ax2.plot(
        t[sel] * 1e3,
        d["i_avg_A"][sel],
        color="tab:red",
        lw=1.2,
        label="line current (period average)",
    )
    ax2.set_ylabel("current (A)", color="tab:red")
    title = (
        f"line voltage and current: PF {rep['pf']:.4f}, THD {100 * rep['thd_i']:.2f} %"
        if rep["steady"]
        else f"line voltage and current (not steady: {rep['steady_reason']})"
    )
    ax.set_title(title, fontsize=9)
    fig.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    paths.append(out / "line.png")
    save_png(fig, paths[-1])
    plt.close(fig)

    fig, axs = plt.subplots(3, 1, figsize=(10, 7), sharex=True)
    axs[0].plot(t, d["vbus_V"], lw=0.8, label="bus (period average)")
    axs[0].plot(t, d["vref_V"], lw=0.8, ls="--", label="reference")
    axs[0].set_ylabel("bus (V)")
    axs[0].legend(fontsize=8)
    axs[1].plot(t, d["duty"], lw=0.5)
    axs[1].set_ylabel("main duty")
    axs[2].step(t, d["mode"], where="post", lw=0.8)
    axs[2].set_yticks(range(len(MODE_NAMES)))
    axs[2].set_yticklabels(MODE_NAMES, fontsize=7)
    axs[2].set_xlabel("time (s)")
    for ev in res.scenarios[k].events:
        for a in axs:
            a.axvline(ev.t_s, color="grey", lw=0.6, ls=":")
    fig.suptitle("bus, duty and supervisor mode")
    fig.tight_layout()
    paths.append(out / "bus_duty_mode.png")
    save_png(fig, paths[-1])
    plt.close(fig)

    if rep["steady"]:
        paths.append(_harmonics_plot(rep, out / "harmonics.png"))
    return paths


def _harmonics_plot(rep: dict, path: Path) -> Path:
    """Harmonic groups against the Class A limits, with the margin to each (in scope only)."""
    import matplotlib.pyplot as plt

    h = np.arange(2, metrics.H_MAX + 1)
    lim = np.array([metrics.class_a_limit_A(int(x)) for x in h])
    fig, ax = plt.subplots(figsize=(10, 4))
    ax.bar(
        h,
        rep["harmonics_A"][1:],
        color="tab:red",
        label="measured group (A rms); bar label: margin to the limit (%)",
    )
    if rep["class_a_applicable"]:
        ax.step(h, lim, where="mid", color="k", lw=1, label="IEC 61000-3-2 Class A limit")
        for hh, g in zip(h, rep["harmonics_A"][1:], strict=True):  # margin to each limit, %
            ax.annotate(
                f"{rep['class_a_margins_pct'][str(hh)]:.0f}",
                (hh, max(g, 1e-4)),
                ha="center",
                va="bottom",
                fontsize=5,
                rotation=90,
            )
        worst = rep["class_a_margins_pct"][str(rep["class_a_worst_h"])]
        verdict = (
            ("pass" if rep["class_a_pass"] else "FAIL") + f", least margin {worst:.0f} % "
            f"at h{rep['class_a_worst_h']} (simulated: not a compliance result)"
        )
    else:
        verdict = f"not applicable: {rep['class_a_reason']}"
    ax.set_yscale("log")
    ax.set_xlabel("harmonic order")
    ax.set_ylabel("A rms")
    ax.set_title(f"current harmonics (IEC 61000-4-7 groups): Class A {verdict}", fontsize=9)
    ax.legend(fontsize=8)
    fig.tight_layout()
    save_png(fig, path)
    plt.close(fig)
    return path


def save_png(fig, path: Path) -> None:
    """The PNG through a temporary file renamed into place."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
