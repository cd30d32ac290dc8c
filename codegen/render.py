"""Render the C templates (jinja2) into source text: deterministic, byte for byte."""
from __future__ import annotations

from itertools import groupby
from pathlib import Path

import jinja2

from c_templates import TEMPLATE_DIR

from .config import Config
from .constants import build_constants
from .resolve import Resolved
from .tuning import BUS_BLOCKS, Tuning

VERSION = "0.1.0"
# One template pair per block, in signal order, then the top level.
BLOCKS = ["math", "pi", "sense", "polarity", "rms", "busavg", "vloop", "iref", "iloop", "pwm", "supervisor", "ctrl"]
HEADER_ONLY = {"math"}


def _format_names(p: str, number_format: str) -> dict:
    """Names the templates use where the two number formats differ."""
    fixed = number_format == "q15"
    return dict(fixed=fixed, real="int32_t" if fixed else "float", zero="0" if fixed else "0.0f",
                abs=f"{p}_absq" if fixed else f"{p}_absf", clamp=f"{p}_clampq" if fixed else f"{p}_clampf")


def _context(cfg: Config, **extra) -> dict:
    """What every template sees: prefix, banner fields and the number format's names."""
    p = cfg.control.prefix
    return dict(p=p, P=p.upper(), version=VERSION, source_name=Path(cfg.source).name, digest=cfg.digest(),
                number_format=cfg.control.number_format, vout=cfg.spec.vout,
                **_format_names(p, cfg.control.number_format), **extra)


def _env() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(TEMPLATE_DIR)),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
        autoescape=False,
    )


TEST_BREAKS = ("no_zc_blank",)


def render(cfg: Config, resolved: Resolved, tuning: Tuning, iline_peak_A: float, test_break: str | None = None) -> dict[str, str]:
    """Return {file name: C text} for every generated file.

    ``test_break`` (tests only, never from a config): render a deliberately broken
    controller, ``no_zc_blank`` (no zero-crossing window: it keeps switching in the old
    polarity until the new one is confirmed), so the tests can show that the fault
    campaign catches it."""
    if test_break is not None and test_break not in TEST_BREAKS:
        raise ValueError(f"test_break must be one of {TEST_BREAKS}")
    consts = build_constants(cfg, resolved, tuning, iline_peak_A)
    p = cfg.control.prefix
    base = _context(cfg, bus_blocks=BUS_BLOCKS, test_break=test_break)
    env = _env()
    files: dict[str, str] = {}
    groups = [(g, list(items)) for g, items in groupby(consts, key=lambda k: k.group)]
    name = f"{p}_config.h"
    files[name] = env.get_template("config.h.j2").render(**base, file=name, groups=groups)
    for block in BLOCKS:
        for ext in ("h", "c"):
            if ext == "c" and block in HEADER_ONLY:
                continue
            name = f"{p}_{block}.{ext}"
            files[name] = env.get_template(f"{block}.{ext}.j2").render(**base, file=name)
    return files


def render_host(cfg: Config) -> dict[str, str]:
    """Host-only sources (batch stepping, probes, benchmark loop): built beside the MCU
    sources for the desktop, never written by ``pfcrig generate``."""
    p = cfg.control.prefix
    base = _context(cfg)
    env = _env()
    return {f"{p}_host_batch.{ext}": env.get_template(f"host_batch.{ext}.j2").render(**base, file=f"{p}_host_batch.{ext}")
            for ext in ("h", "c")}


def render_link(cfg: Config, host_main: bool = False, port: str | None = None) -> dict[str, str]:
    """The target shell (framed link around the step; portable, for the MCU) and, with
    ``host_main``, the host port whose stdin/stdout stand in for the UART, or with
    ``port="mps2_an386"`` the QEMU Cortex-M4F port (startup, vectors, UART, linker script)."""
    p = cfg.control.prefix
    base = _context(cfg)
    env = _env()
    names = [("link.h.j2", f"{p}_link.h"), ("link.c.j2", f"{p}_link.c")]
    if host_main:
        names.append(("link_host_main.c.j2", f"{p}_link_host_main.c"))
    if port == "mps2_an386":
        names += [("link_mps2_an386.c.j2", f"{p}_link_mps2_an386.c"), ("link_mps2_an386.ld.j2", f"{p}_mps2_an386.ld")]
    return {out: env.get_template(t).render(**base, file=out) for t, out in names}


def write(files: dict[str, str], out_dir: str | Path) -> list[Path]:
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in sorted(files):
        path = out / name
        path.write_bytes(files[name].encode("utf-8"))
        paths.append(path)
    return paths
