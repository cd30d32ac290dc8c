"""Board projects: beside the controller, a complete firmware project for one emulated board
(Makefile and CMakeLists.txt for arm-none-eabi-gcc, startup code, vector table, linker
script, the ADC-complete interrupt skeleton, the port header the board fills in, a README
with the bring-up order)."""

from __future__ import annotations

from dataclasses import dataclass

from design.config import ConfigError
from design.project import Project

from .build import STRICT_FLAGS
from .render import _context, environment, render, render_link
from .target import TARGETS


@dataclass(frozen=True)
class Board:
    name: str
    port: str  # the link's port (codegen.render.MPS2_PORTS)
    target: str  # codegen.target.TARGETS key
    cpu_name: str
    formats: tuple[str, ...]  # number formats the core runs


BOARDS = {
    "mps2-an386": Board(
        "mps2-an386", "mps2_an386", "cortex-m4f", "Cortex-M4 with FPU", ("float32", "q15")
    ),
    "mps2-an385": Board("mps2-an385", "mps2_an385", "cortex-m3", "Cortex-M3, no FPU", ("q15",)),
}


def render_board(prj: Project, name: str) -> dict[str, str]:
    """{file name: text} of the controller and the board project for board ``name``."""
    if name not in BOARDS:
        raise ConfigError(f"unknown board {name!r}: one of {', '.join(BOARDS)}")
    b = BOARDS[name]
    fmt = prj.config.control.number_format
    if fmt not in b.formats:
        raise ConfigError(
            f'{prj.config.source}: [control] number_format = "{fmt}": the {name} board '
            f"({b.cpu_name}) runs {' or '.join(b.formats)}; change the key or the board"
        )
    p = prj.config.control.prefix
    files = {**render(prj), **render_link(prj, port=b.port)}
    ctrl = sorted(n for n in render(prj) if n.endswith(".c"))
    base = _context(
        prj,
        board=name,
        port=b.port,
        machine=name,
        fpu=b.target == "cortex-m4f",
        cpu=TARGETS[b.target],
        cpu_name=b.cpu_name,
        warn=STRICT_FLAGS,
        ctrl_sources=ctrl,
    )
    env = environment()
    for tpl, out in (
        ("board_port.h.j2", f"{p}_board_port.h"),
        ("board_isr.c.j2", f"{p}_isr.c"),
        ("board_makefile.j2", "Makefile"),
        ("board_cmake.j2", "CMakeLists.txt"),
        ("board_readme.md.j2", "README.md"),
    ):
        files[out] = env.get_template(tpl).render(**base, file=out)
    return files
