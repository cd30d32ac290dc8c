"""Target builds of the generated C: the cross-compile check for Cortex-M with
``arm-none-eabi-gcc``, and the images of the lockstep link's targets (a host process, the
QEMU Cortex-M4F port), one build path for both.

Sizes are counted one way everywhere (``image_size``, from ``size``): flash = text + data
(code, read-only data and the initial values of data), RAM = data + bss; the controller
state itself is the caller's, reported as ``sizeof``.  The undefined symbols outside the
generated code (a libm call or an allocator would show there) are listed.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from design.project import Project

from .build import (
    HOST_FLAGS,
    STRICT_FLAGS,
    BuildError,
    cache_root,
    compile_objects,
    record_digest,
    verified,
)
from .render import render, render_link
from .stack import StackReport, worst_case

TARGETS = {
    "cortex-m4f": [
        "-mcpu=cortex-m4",
        "-mthumb",
        "-mfloat-abi=hard",
        "-mfpu=fpv4-sp-d16",
        "-O2",
        "-ffp-contract=off",
    ],
    "cortex-m3": [
        "-mcpu=cortex-m3",
        "-mthumb",
        "-mfloat-abi=soft",
        "-O2",
        "-ffp-contract=off",
    ],
    "cortex-m0plus": [
        "-mcpu=cortex-m0plus",
        "-mthumb",
        "-mfloat-abi=soft",
        "-O2",
        "-ffp-contract=off",
    ],
}
# the controller's budget on a Cortex-M (our choice, README "The generated C"): 4 KiB of flash
# and 256 B of state held the control alone; the sensor-fault checks, the slow-leg and
# synchronous-switch guards, the relay and power good take about 2.7 KiB and 48 B more; the
# feedforward's low-pass and surge cut, the soft-start hold and the rectified-current rule
# about 0.5 KiB more (8268 B on the demo)
FLASH_LIMIT_B = 9216
STATE_LIMIT_B = 320
# compiler support routines (soft-float and integer division on cores without them): not libm
SUPPORT = re.compile(
    r"^__aeabi_|^__(add|sub|mul|div|neg|cmp|eq|ne|lt|le|gt|ge|un|fix|float|extend|trunc)\w*[sd]f\d?$"
)


@dataclass
class TargetReport:
    target: str
    flags: list[str]
    flash_B: int
    ram_B: int
    state_B: int
    undefined: list[str] = field(default_factory=list)
    support_calls: list[str] = field(default_factory=list)
    stack: StackReport | None = None  # worst case from <prefix>_step (-fcallgraph-info=su)

    def ok(self) -> bool:
        return not self.undefined

    def as_dict(self) -> dict:
        return dict(
            target=self.target,
            flags=self.flags,
            flash_B=self.flash_B,
            ram_B=self.ram_B,
            state_B=self.state_B,
            undefined=self.undefined,
            support_calls=self.support_calls,
            stack_bytes=self.stack.bytes if self.stack else None,
            stack_path=self.stack.path if self.stack else None,
            stack_unknown_callees=self.stack.unknown if self.stack else None,
            flash_limit_B=FLASH_LIMIT_B,
            state_limit_B=STATE_LIMIT_B,
        )


def available(cc: str = "arm-none-eabi-gcc") -> bool:
    return shutil.which(cc) is not None


def check(
    files: dict[str, str], prefix: str, target: str = "cortex-m4f", cc: str = "arm-none-eabi-gcc"
) -> TargetReport:
    if not available(cc):
        raise BuildError(
            f"{cc} not found: install gcc-arm-none-eabi (Debian) for the cross-compile check"
        )
    flags = TARGETS[target]
    tool = cc[: -len("gcc")]
    with tempfile.TemporaryDirectory(prefix="pfcrig-target-") as tmp:
        src = Path(tmp) / "src"
        src.mkdir()
        for name, text in files.items():
            (src / name).write_text(text)
        objs = compile_objects(src, Path(tmp) / "obj", cc=cc, flags=[*flags, "-fcallgraph-info=su"])
        sizes = image_size(objs, tool + "size")
        stack = worst_case(sorted((Path(tmp) / "obj").glob("*.ci")), f"{prefix}_step")
        probe = Path(tmp) / "probe.c"
        probe.write_text(f'#include "{prefix}_ctrl.h"\n{prefix}_ctrl_t {prefix}_probe_state;\n')
        pobj = Path(tmp) / "probe.o"
        subprocess.run(
            [
                cc,
                *STRICT_FLAGS,
                *flags,
                "-fno-common",
                "-I",
                str(src),
                "-c",
                str(probe),
                "-o",
                str(pobj),
            ],
            check=True,
            capture_output=True,
        )
        nm = subprocess.run(
            [tool + "nm", "-S", str(pobj)], capture_output=True, text=True, check=True
        ).stdout
        state = next(
            int(ln.split()[1], 16) for ln in nm.splitlines() if ln.endswith(f"{prefix}_probe_state")
        )
        nm_all = subprocess.run(
            [tool + "nm", *map(str, objs)], capture_output=True, text=True, check=True
        ).stdout
    defined = {ln.split()[-1] for ln in nm_all.splitlines() if re.match(r"^[0-9a-f]+ [TDRBC] ", ln)}
    undef = sorted(
        {ln.split()[-1] for ln in nm_all.splitlines() if ln.strip().startswith("U ")} - defined
    )
    support = [u for u in undef if SUPPORT.match(u)]
    return TargetReport(
        target,
        flags,
        sizes["flash_B"],
        sizes["ram_B"],
        state,
        [u for u in undef if u not in support],
        support,
        stack,
    )


def image_size(paths: list[Path], size_tool: str = "arm-none-eabi-size") -> dict[str, int]:
    """Flash (text + data) and static RAM (data + bss) of objects or a linked image, summed."""
    out = subprocess.run(
        [size_tool, *map(str, paths)], capture_output=True, text=True, check=True
    ).stdout
    text = data = bss = 0
    for line in out.splitlines()[1:]:
        parts = line.split()
        text, data, bss = text + int(parts[0]), data + int(parts[1]), bss + int(parts[2])
    return {
        "flash_B": text + data,
        "ram_B": data + bss,
        "text_B": text,
        "data_B": data,
        "bss_B": bss,
    }


@dataclass(frozen=True)
class TargetBuild:
    """How one kind of target image is compiled and linked."""

    name: str
    cc: str
    flags: list[str]
    port: dict  # keyword arguments of ``render_link``
    link_args: list[str] = field(default_factory=list)  # {ld} stands for the linker script
    suffix: str = ""


HOST_BUILD = TargetBuild(
    "host", "gcc", [f for f in HOST_FLAGS if f != "-fPIC"], {"host_main": True}
)
QEMU_M4F_BUILD = TargetBuild(
    "qemu-m4f",
    "arm-none-eabi-gcc",
    TARGETS["cortex-m4f"],
    {"port": "mps2_an386"},
    [*TARGETS["cortex-m4f"], "-nostdlib", "-T", "{ld}"],
    "_mps2_an386.elf",
)
QEMU_M3_BUILD = TargetBuild(
    "qemu-m3",
    "arm-none-eabi-gcc",
    TARGETS["cortex-m3"],
    {"port": "mps2_an385"},
    [*TARGETS["cortex-m3"], "-nostdlib", "-T", "{ld}"],
    "_mps2_an385.elf",
)


def build_target(prj: Project, tb: TargetBuild) -> Path:
    """Compile controller + target shell + port with the strict flags and link them; cached
    by the hash of the sources and flags."""
    if shutil.which(tb.cc) is None:
        hint = ": install gcc-arm-none-eabi (Debian)" if "arm" in tb.cc else ""
        raise BuildError(f"{tb.cc} not found{hint}")
    p = prj.config.control.prefix
    files = {**render(prj), **render_link(prj, **tb.port)}
    h = hashlib.sha256("".join(files[k] for k in sorted(files)).encode())
    h.update(" ".join([tb.cc, *tb.flags, *tb.link_args]).encode())
    exe = cache_root() / "pil" / f"{p}_{h.hexdigest()[:16]}{tb.suffix}"
    if verified(exe):  # a file there that pfcrig did not build (or that changed) is not run
        return exe
    exe.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(dir=cache_root()) as tmp:
        src = Path(tmp) / "src"
        src.mkdir()
        for n, t in files.items():
            (src / n).write_text(t)
        objs = compile_objects(src, Path(tmp) / "obj", cc=tb.cc, flags=tb.flags)
        out = Path(tmp) / "target"
        ld = next((str(src / n) for n in files if n.endswith(".ld")), "")
        args = [a.replace("{ld}", ld) for a in tb.link_args] or tb.flags
        libs = ["-lgcc"] if tb.link_args else []
        r = subprocess.run(
            [tb.cc, *args, *map(str, objs), "-o", str(out), *libs], capture_output=True, text=True
        )
        if r.returncode:
            raise BuildError(f"link of the {tb.name} target failed:\n{r.stderr}")
        record_digest(out)
        os.replace(out.with_name(out.name + ".sha256"), exe.with_name(exe.name + ".sha256"))
        os.replace(out, exe)
    return exe
