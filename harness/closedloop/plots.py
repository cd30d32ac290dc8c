"""PNG plots of a closed-loop run: line voltage and current, bus/duty/mode, harmonics
against the IEC 61000-3-2 Class A limits."""

from __future__ import annotations

from pathlib import Path

import numpy as np

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

    w0, w1 = rep["window_s"]
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
    ax.set_title(f"line voltage and current: PF {rep['pf']:.4f}, THD {100 * rep['thd_i']:.2f} %")
    fig.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    paths.append(out / "line.png")
    fig.savefig(paths[-1], dpi=110)
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
    fig.savefig(paths[-1], dpi=110)
    plt.close(fig)

    h = np.arange(2, metrics.H_MAX + 1)
    lim = [metrics.class_a_limit_A(int(x)) for x in h]
    fig, ax = plt.subplots(figsize=(10, 4))
    ax.bar(h, rep["harmonics_A"][1:], color="tab:red", label="measured (A rms)")
    ax.step(h, lim, where="mid", color="k", lw=1, label="IEC 61000-3-2 Class A limit")
    ax.set_yscale("log")
    ax.set_xlabel("harmonic order")
    ax.set_ylabel("A rms")
    ax.set_title(
        "current harmonics over the IEC 61000-4-7 window: Class A "
        + ("pass" if rep["class_a_pass"] else "FAIL")
    )
    ax.legend(fontsize=8)
    fig.tight_layout()
    paths.append(out / "harmonics.png")
    fig.savefig(paths[-1], dpi=110)
    plt.close(fig)
    return paths
