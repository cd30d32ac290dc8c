"""Render the C templates (jinja2) into source text: deterministic, byte for byte."""

from __future__ import annotations

import math
from itertools import groupby
from typing import Any

import jinja2

from c_templates import TEMPLATE_DIR
from design import contract
from design.config import ConfigError
from design.constants import build_constants
from design.project import Project
from design.tuning import BUS_BLOCKS

from .literals import c_literal

VERSION = "0.1.0"
# One template pair per block, in signal order, then the top level.
BLOCKS = [
    "types",
    "math",
    "pi",
    "sense",
    "polarity",
    "plaus",
    "rms",
    "busavg",
    "vloop",
    "iref",
    "xcomp",
    "iloop",
    "pwm",
    "supervisor",
    "ctrl",
    "board",
]
HEADER_ONLY = {"types", "math", "board"}
# QEMU's MPS2 machines the link has a port for: {port: has an FPU}
MPS2_PORTS = {"mps2_an386": True, "mps2_an385": False}


def _units(P: str, fixed: bool) -> dict[str, str]:
    """What a field's unit comment says in each number format: SI in float builds, the
    per-unit base and Q format in q15 builds."""
    if not fixed:
        return dict(V="V", A="A", W="W", V2="V^2", inv_V="1/V", inv_V2="1/V^2", one="1")
    return dict(
        V=f"per unit of {P}_V_BASE_V, Q15",
        A=f"per unit of {P}_I_BASE_A, Q15",
        W=f"per unit of {P}_P_BASE_W, Q15",
        V2=f"per unit of {P}_V_BASE_V squared, Q30",
        inv_V=f"{P}_V_BASE_V/v, Q15",
        inv_V2=f"1/(per unit of {P}_V_BASE_V)^2, Q15",
        one="Q15",
    )


def _format_names(p: str, P: str, number_format: str) -> dict[str, Any]:
    """Names the templates use where the two number formats differ."""
    fixed = number_format == "q15"
    return dict(
        fixed=fixed,
        real=f"{p}_real_t",
        zero="0" if fixed else "0.0f",
        abs=f"{p}_absq" if fixed else f"{p}_absf",
        clamp=f"{p}_clampq" if fixed else f"{p}_clampf",
        u=_units(P, fixed),
    )


def _context(prj: Project, **extra: Any) -> dict[str, Any]:
    """What every template sees: prefix, banner fields, the number format's names and the
    controller contract."""
    cfg = prj.config
    p = cfg.control.prefix
    P = p.upper()
    return dict(
        p=p,
        P=P,
        version=VERSION,
        digest=cfg.digest(),
        number_format=cfg.control.number_format,
        vout=cfg.spec.vout,
        ct=contract,
        link=contract.link_table(prj.resolved.line_split),
        adc_fields=contract.adc_fields(prj.resolved.line_split),
        split=prj.resolved.line_split,
        edge=cfg.control.carrier == "edge",
        timing=contract.timing(cfg.control.carrier),
        bus_blocks=BUS_BLOCKS,
        **_format_names(p, P, cfg.control.number_format),
        **extra,
    )


XC_BITS = 5  # the X-capacitor compensation's cosine table: 2^XC_BITS intervals over 0..pi


def xcomp_table(prj: Project) -> dict[str, Any]:
    """cos(pi k / n), k = 0..n, as C literals of the number format (Q15 in q15 builds)."""
    n = 2**XC_BITS
    vals = [math.cos(math.pi * k / n) for k in range(n + 1)]
    if prj.config.control.number_format == "q15":
        lits = [f"{max(min(round(v * 32768.0), 32767), -32768)}" for v in vals]
    else:
        lits = [f"{v:.9e}f" for v in vals]
    return dict(xc_n=n, xc_bits=XC_BITS, xc_table=lits)


def environment(loader: jinja2.BaseLoader | None = None) -> jinja2.Environment:
    """The templates' environment; ``loader`` replaces the shipped templates (tests use it
    to render deliberately broken controllers)."""
    return jinja2.Environment(
        loader=loader or jinja2.FileSystemLoader(str(TEMPLATE_DIR)),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
        autoescape=False,
    )


def render(prj: Project, loader: jinja2.BaseLoader | None = None) -> dict[str, str]:
    """Return {file name: C text} for every generated controller file."""
    consts = build_constants(prj)
    p = prj.config.control.prefix
    fmt = prj.config.control.number_format
    try:
        lits = {k.name: c_literal(k, fmt) for k in consts}
    except ValueError as exc:  # a constant the number format cannot hold
        raise ConfigError(
            f'{prj.config.source}: [control] number_format = "{fmt}": {exc}; '
            'change the key it comes from, or use "float32"'
        ) from None
    board = dict(
        timer_clock_Hz=prj.config.control.pwm_timer_clock,
        dead_time_counts=int(
            round(prj.config.plant.dead_time * prj.config.control.pwm_timer_clock)
        ),
        hw_ov_V=prj.resolved.hw_ov_level_V,
        device_A=prj.resolved.device_current_A,
    )
    base = _context(prj, cv={k.name: k.value for k in consts}, board=board, **xcomp_table(prj))
    env = environment(loader)
    files: dict[str, str] = {}
    groups = [(g, list(items)) for g, items in groupby(consts, key=lambda k: k.group)]
    name = f"{p}_config.h"
    files[name] = env.get_template("config.h.j2").render(
        **base, file=name, groups=groups, literals=lits
    )
    for block in BLOCKS:
        for ext in ("h", "c"):
            if ext == "c" and block in HEADER_ONLY:
                continue
            name = f"{p}_{block}.{ext}"
            files[name] = env.get_template(f"{block}.{ext}.j2").render(**base, file=name)
    return files


def render_host(prj: Project) -> dict[str, str]:
    """Host-only sources (batch stepping, probes, benchmark loop): built beside the MCU
    sources for the desktop, never written by ``pfcrig generate``."""
    p = prj.config.control.prefix
    base = _context(prj)
    env = environment()
    return {
        f"{p}_host_batch.{ext}": env.get_template(f"host_batch.{ext}.j2").render(
            **base, file=f"{p}_host_batch.{ext}"
        )
        for ext in ("h", "c")
    }


def render_link(prj: Project, host_main: bool = False, port: str | None = None) -> dict[str, str]:
    """The target shell (framed link around the step; portable, for the MCU) and, with
    ``host_main``, the host port whose stdin/stdout stand in for the UART, or with
    ``port="mps2_an386"`` the QEMU Cortex-M4F port, ``"mps2_an385"`` the Cortex-M3 one (startup,
    vectors, UART, linker script)."""
    p = prj.config.control.prefix
    base = _context(prj)
    env = environment()
    names = [("link.h.j2", f"{p}_link.h"), ("link.c.j2", f"{p}_link.c")]
    if host_main:
        names.append(("link_host_main.c.j2", f"{p}_link_host_main.c"))
    if port in MPS2_PORTS:
        base.update(port=port, machine=port.replace("_", "-"), fpu=MPS2_PORTS[port])
        names += [
            ("link_mps2.c.j2", f"{p}_link_{port}.c"),
            ("link_mps2.ld.j2", f"{p}_{port}.ld"),
        ]
    elif port is not None:
        raise ValueError(f"unknown port {port!r}: one of {', '.join(MPS2_PORTS)}")
    return {out: env.get_template(t).render(**base, file=out) for t, out in names}
