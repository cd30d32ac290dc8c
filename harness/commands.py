"""Sub-commands of ``pfcrig`` other than ``init``."""
from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path


from .project import load_project, render_of, tuning_of
from .tables import format_table


def dump_json(obj, fh=None) -> None:
    out = fh or sys.stdout
    json.dump(obj, out, indent=2, sort_keys=True, default=_jsonable)
    out.write("\n")


def write_json(path, doc) -> None:
    """Write a report as JSON (non-finite floats as null) and say so."""
    with open(path, "w") as fh:
        dump_json(_clean(doc), fh)
    print(f"wrote {path}")


def _scenario(args, prj, default_duration_s: float):
    """The scenario a run-like command was given (or the nominal one), with --duration applied."""
    from dataclasses import replace

    from .scenario import default_for, load as load_scenario

    scn = load_scenario(args.scenario) if args.scenario else default_for(prj.config.spec, default_duration_s)
    return replace(scn, duration_s=args.duration) if args.duration else scn


def _jsonable(x):
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if hasattr(x, "item"):
        return x.item()
    raise TypeError(f"not JSON: {type(x)}")


def _clean(obj):
    """Non-finite floats become null (JSON has no inf/nan)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    return obj


def design(args: argparse.Namespace) -> int:
    prj = load_project(args.config)
    tun = tuning_of(prj)
    doc = {**prj.sizing.as_dict(), **{f"resolved_{k}": v for k, v in prj.resolved.as_dict().items()}}
    doc["loops"] = tun.as_dict()
    doc["config_digest"] = prj.config.digest()
    if args.plot:
        doc["plots"] = [str(p) for p in bode_plots(tun, args.plot)]
    if args.json:
        dump_json(_clean(doc))
        return 0
    print(f"pfcrig design: {prj.config.source} (digest {prj.config.digest()})\n")
    print("Power stage at vin_rms_min, full power")
    print(format_table(["quantity", "value", "unit", "formula", "source"],
                       [(k, f"{v:.4g}", u, f, src) for k, v, u, f, src in prj.sizing.rows()]))
    print("\nLoops (PI by backward Euler; margins computed on the discrete PI with the plant and delay)")
    rows = []
    for lp in (tun.current, tun.voltage):
        rows.append((lp.name.split("_")[0], f"{lp.kp:.5g}", f"{lp.ki:.5g}", lp.units, f"{lp.ts_s * 1e6:.4g}",
                     f"{lp.delay_s * 1e6:.4g}", f"{lp.target_crossover_Hz:.4g}", f"{lp.crossover_Hz:.4g}",
                     f"{lp.target_phase_margin_deg:.1f}", f"{lp.phase_margin_deg:.1f}", f"{lp.gain_margin_dB:.1f}"))
    print(format_table(["loop", "kp", "ki (/s)", "units", "T (us)", "delay (us)", "fc target (Hz)", "fc (Hz)",
                        "PM target", "PM (deg)", "GM (dB)"], rows))
    print("\nDerived settings")
    print(format_table(["setting", "value"], [(k, f"{v:.4g}") for k, v in prj.resolved.as_dict().items()]))
    if args.plot:
        print("\nwrote " + ", ".join(doc["plots"]))
    return 0


def bode_plots(tun, out_dir) -> list[Path]:
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
        a.set_title(f"{kind} loop: crossover {lp.crossover_Hz:.4g} Hz, phase margin {lp.phase_margin_deg:.1f} deg, "
                    f"gain margin {lp.gain_margin_dB:.1f} dB")
        fig.tight_layout()
        paths.append(out / f"bode_{kind}.png")
        fig.savefig(paths[-1], dpi=110)
        plt.close(fig)
    return paths


def generate(args: argparse.Namespace) -> int:
    from codegen.render import write

    prj = load_project(args.config)
    files = render_of(prj)
    extra = {}
    if args.with_link:
        from codegen.render import render_link

        extra = render_link(prj.config)
    paths = write({**files, **extra}, args.output)
    print(f"wrote {len(paths)} files to {args.output} (config digest {prj.config.digest()})")
    if extra:
        p = prj.config.control.prefix
        print(f"target shell for `pfcrig pil --target serial`: {', '.join(sorted(extra))}; the board supplies "
              f"{p}_link_getc, {p}_link_putc, {p}_link_flush and {p}_link_ticks (see {p}_link.h)")
    if args.check_target:
        return check_target(prj, files)
    return 0


def check_target(prj, files) -> int:
    from codegen import target

    if not target.available():
        print("target check: arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi); skipped", file=sys.stderr)
        return 1
    p = prj.config.control.prefix
    fmt = prj.config.control.number_format
    targets = ["cortex-m4f"] + (["cortex-m0plus"] if fmt == "q15" else [])
    rows, bad = [], False
    for t in targets:
        rep = target.check(files, p, t)
        ok_flash = rep.flash_B <= target.FLASH_LIMIT_B
        ok_state = rep.state_B <= target.STATE_LIMIT_B
        # the flash and state targets are for the float build on the Cortex-M4F
        bad |= not (rep.ok() and (t != "cortex-m4f" or fmt != "float32" or (ok_flash and ok_state)))
        rows.append((t, fmt, rep.flash_B, rep.ram_B, rep.state_B, ", ".join(rep.undefined) or "none",
                     len(rep.support_calls)))
    print(format_table(["target", "format", "flash (B)", "static RAM (B)", "sizeof ctrl (B)", "foreign symbols",
                        "support calls"], rows))
    print(f"targets for float32 on cortex-m4f: flash <= {target.FLASH_LIMIT_B} B, state <= {target.STATE_LIMIT_B} B")
    return 1 if bad else 0


def run_cmd(args: argparse.Namespace) -> int:
    from . import report
    from .loop import run

    prj = load_project(args.config)
    scn = _scenario(args, prj, 0.6)
    res = run(prj, [scn], model=args.model, progress=not args.quiet)
    rep = report.lane_report(res)
    rep["wall_s"] = res.wall_s
    rep["real_time_factor"] = scn.duration_s / res.wall_s
    print(report.summary_text(rep))
    if args.json:
        write_json(args.json, rep)
    if args.csv:
        report.write_csv(res, args.csv)
        print(f"wrote {args.csv}")
    if args.plot:
        paths = report.write_plots(res, rep, args.plot)
        print("wrote " + ", ".join(map(str, paths)))
    return 0


def register(sub) -> None:
    q = sub.add_parser("generate", help="write the C control code")
    q.add_argument("config")
    q.add_argument("-o", "--output", required=True, metavar="DIR", help="folder for the .c/.h files")
    q.add_argument("--check-target", action="store_true",
                   help="cross-compile for Cortex-M (arm-none-eabi-gcc) and print flash, RAM and state size")
    q.add_argument("--with-link", action="store_true",
                   help="also write the target shell (the lockstep link around the step) for a board run by "
                        "`pfcrig pil --target serial`")
    q.set_defaults(func=generate)

    q = sub.add_parser("run", help="compile the generated C and run it in closed loop against the plant model")
    q.add_argument("config")
    q.add_argument("--scenario", metavar="FILE", help="scenario TOML (default: nominal line, full load, 0.6 s)")
    q.add_argument("--model", choices=["switching", "averaged"], default="switching")
    q.add_argument("--duration", type=float, metavar="S", help="override the scenario duration (s)")
    q.add_argument("--json", metavar="OUT", help="write the report as JSON")
    q.add_argument("--csv", metavar="FILE", help="write the per-period waveforms as CSV")
    q.add_argument("--plot", metavar="DIR", help="write PNG plots")
    q.add_argument("--quiet", action="store_true", help="no progress bar")
    q.set_defaults(func=run_cmd)
    register_fuzz(sub)
    register_bench(sub)
    register_pil(sub)


def fuzz_cmd(args: argparse.Namespace) -> int:
    from . import fuzz

    prj = load_project(args.config)
    out_dir = Path(args.out)
    res = fuzz.campaign(prj, args.examples, seed=args.seed, workers=args.workers, batch=args.batch,
                        out_dir=out_dir, max_event_cycles=args.max_event_cycles, do_shrink=not args.no_shrink,
                        log=lambda m: print(m, file=sys.stderr))
    counts = res.counts()
    rows = [(inv, len(res.verdicts) - counts[inv], counts[inv]) for inv in fuzz.INVARIANTS]
    print(format_table(["invariant", "held", "violated"], rows))
    print(f"{len(res.verdicts)} cases, {sum(not v.ok for v in res.verdicts)} failing, {res.wall_s:.1f} s")
    for p in res.saved:
        print(f"failing case: {p}  (replay: pfcrig run {args.config} --scenario {p})")
    if args.json:
        doc = {"cases": len(res.verdicts), "counts": counts, "wall_s": res.wall_s, "seed": args.seed,
               "bounds": {"recovery_cycles": fuzz.RECOVERY_CYCLES, "restart_cycles": fuzz.RESTART_CYCLES,
                          "zc_spike_limit": fuzz.ZC_SPIKE_LIMIT, "overshoot_limit": fuzz.OVERSHOOT_LIMIT, "max_event_cycles": args.max_event_cycles},
               "failures": [{"failed": v.failed, "case": fuzz.asdict(v.case), "figures": v.figures}
                            for v in res.verdicts if not v.ok],
               "saved": [str(p) for p in res.saved]}
        write_json(args.json, doc)
    return 0 if res.ok else 1


def register_fuzz(sub) -> None:
    q = sub.add_parser("fuzz", help="property-based fault campaign in closed loop")
    q.add_argument("config")
    q.add_argument("--examples", type=int, default=200, metavar="N", help="cases to draw (default 200)")
    q.add_argument("--seed", type=int, default=0, metavar="S")
    q.add_argument("--workers", type=int, default=2, metavar="K", help="processes (default 2)")
    q.add_argument("--batch", type=int, default=128, metavar="B", help="cases per lockstep batch (default 128)")
    q.add_argument("--max-event-cycles", type=float, default=12.0, metavar="C",
                   help="cap on dip/interruption length in line cycles (IEC 61000-4-11 goes to 250/300)")
    q.add_argument("--out", default="fuzz_failures", metavar="DIR", help="where failing cases are saved as scenarios")
    q.add_argument("--no-shrink", action="store_true", help="save failing cases as drawn")
    q.add_argument("--json", metavar="OUT", help="write the campaign report as JSON")
    q.set_defaults(func=fuzz_cmd)


def bench_cmd(args: argparse.Namespace) -> int:
    from importlib import resources

    from .bench import bench

    cfg = args.config or str(resources.files("harness").joinpath("data/universal_1k5.toml"))
    prj = load_project(cfg)
    sizes = tuple(int(x) for x in args.sizes.split(","))
    out = bench(prj, sizes=sizes, log=lambda m: print(m, file=sys.stderr))
    out["config"] = cfg
    rows = [(k, "met" if v else "NOT met") for k, v in out["meets"].items()]
    print(format_table(["target", "status"], rows))
    print(f"bare step {out['bare_step_ns']:.1f} ns; single switching {out['single_switching_rtf']:.4f} x real time; "
          f"averaged {out['single_averaged_rtf']:.4f} x; best batch {out['best_batch_rate_per_s']:.0f} scenario-periods/s")
    if args.json:
        write_json(args.json, out)
    return 0


def register_bench(sub) -> None:
    q = sub.add_parser("bench", help="measure the step cost, real-time factors and batch throughput here")
    q.add_argument("--config", help="config to measure (default: the shipped example)")
    q.add_argument("--sizes", default="1,16,256,1024", help="batch sizes (default 1,16,256,1024)")
    q.add_argument("--json", metavar="OUT")
    q.set_defaults(func=bench_cmd)


def pil_cmd(args: argparse.Namespace) -> int:
    from . import report
    from .loop import run
    from .pil import FLOAT32_INSN_LIMIT, compare_outputs, run_pil

    if args.target == "serial" and not args.port:
        print("pfcrig pil: --target serial needs --port (a device such as /dev/ttyUSB0, or a pyserial URL "
              "such as socket://127.0.0.1:4000)", file=sys.stderr)
        return 2
    prj = load_project(args.config)
    scn = _scenario(args, prj, 0.2)
    pil = run_pil(prj, scn, target=args.target, timeout_s=args.timeout, port=args.port, baud=args.baud)
    res, stats, wall = pil.result, pil.link_stats, pil.wall_s
    doc = {"target": args.target, "scenario": scn.name, "periods": res.periods, "link": stats,
           "wall_s": wall, "real_time_factor": res.periods / prj.config.spec.fsw / wall}
    if args.target == "serial":
        doc["port"], doc["baud"] = args.port, args.baud
    code = 0
    if "aborted" in res.extras:
        doc["aborted"] = res.extras["aborted"]
        print(f"pfcrig pil: {res.extras['aborted']}", file=sys.stderr)
        code = 1
    else:
        rep = report.lane_report(res)
        doc.update(rep)
        print(report.summary_text(rep))
        ref = run(prj, [scn], progress=False)
        cmp_ = compare_outputs(ref, res)
        doc["equivalence"] = {"periods": cmp_.periods, "equal": cmp_.equal, "first_difference": cmp_.first_difference,
                              "final_state_equal": cmp_.final_state_equal}
        if cmp_.equal:
            print(f"target outputs equal the in-process run for all {cmp_.periods} periods, "
                  f"and so does the final controller state")
        else:
            print(f"target differs from the in-process run: {cmp_.first_difference or 'final controller state'}")
            code = 1
    if pil.cost:
        c = pil.cost
        doc["cost_on_target"] = {**c, "method": "SysTick read around each step under QEMU -icount shift=0 "
                                 "(time counts instructions), calibrated at boot against a loop of known "
                                 "instruction count; ticks of an empty measurement subtracted",
                                 "float32_limit_instructions": FLOAT32_INSN_LIMIT}
        print(f"cost on the target: {c['mean']:.0f} instructions per step on average, {c['max']:.0f} at most "
              f"(min {c['min']:.0f}; resolution {c['resolution']:.0f}) over {c['steps']} steps")
    if pil.image:
        doc["image"] = pil.image
        print(f"image: {pil.image['flash_B']} B flash, {pil.image['ram_B']} B RAM (static)")
    print(f"link: {stats['frames_sent']} frames sent, {stats['retries']} retries, {stats['bad_crc']} bad CRC, "
          f"{stats['bytes_dropped']} bytes dropped; {doc['real_time_factor']:.3f} x real time")
    if args.json:
        write_json(args.json, doc)
    return code


def register_pil(sub) -> None:
    from .pil import TARGETS

    q = sub.add_parser("pil", help="run the controller on a target over the lockstep link (processor in the loop)")
    q.add_argument("config")
    q.add_argument("--target", choices=TARGETS, default="host",
                   help="host: a separate process, stdin/stdout as its UART; qemu-m4f: the image cross-compiled "
                        "for the Cortex-M4F, booted on QEMU's mps2-an386 with its first UART on a pseudo-terminal; "
                        "serial: a board already running the target shell, on --port")
    q.add_argument("--port", metavar="PORT",
                   help="serial device (/dev/ttyUSB0) or pyserial URL (socket://HOST:PORT) for --target serial")
    q.add_argument("--baud", type=int, default=115200, metavar="N", help="serial bit rate (default 115200, 8N1)")
    q.add_argument("--scenario", metavar="FILE")
    q.add_argument("--duration", type=float, metavar="S")
    q.add_argument("--timeout", type=float, default=2.0, metavar="S", help="answer timeout per frame (s)")
    q.add_argument("--json", metavar="OUT", help="write the report (partial if the target stops answering)")
    q.set_defaults(func=pil_cmd)
