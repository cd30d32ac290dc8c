"""Cross-compile check of the generated C for Cortex-M with ``arm-none-eabi-gcc``.

Reports, per build: flash (text + rodata, as ``size`` counts them in ``text``),
RAM (data + bss of the objects; the controller state itself is the caller's,
reported as ``sizeof``), and the undefined symbols outside the generated code (a
libm call or an allocator would show there).
"""
from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from .build import STRICT_FLAGS, BuildError, compile_objects

TARGETS = {
    "cortex-m4f": ["-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=hard", "-mfpu=fpv4-sp-d16", "-O2", "-ffp-contract=off"],
    "cortex-m0plus": ["-mcpu=cortex-m0plus", "-mthumb", "-mfloat-abi=soft", "-O2", "-ffp-contract=off"],
}
FLASH_LIMIT_B = 4096
STATE_LIMIT_B = 256
# compiler support routines (soft-float and integer division on cores without them): not libm
SUPPORT = re.compile(r"^__aeabi_|^__(add|sub|mul|div|neg|cmp|eq|ne|lt|le|gt|ge|un|fix|float|extend|trunc)\w*[sd]f\d?$")


@dataclass
class TargetReport:
    target: str
    flags: list[str]
    flash_B: int
    ram_B: int
    state_B: int
    undefined: list[str] = field(default_factory=list)
    support_calls: list[str] = field(default_factory=list)

    def ok(self) -> bool:
        return not self.undefined

    def as_dict(self) -> dict:
        return dict(target=self.target, flags=self.flags, flash_B=self.flash_B, ram_B=self.ram_B, state_B=self.state_B,
                    undefined=self.undefined, support_calls=self.support_calls,
                    flash_limit_B=FLASH_LIMIT_B, state_limit_B=STATE_LIMIT_B)


def available(cc: str = "arm-none-eabi-gcc") -> bool:
    return shutil.which(cc) is not None


def check(files: dict[str, str], prefix: str, target: str = "cortex-m4f", cc: str = "arm-none-eabi-gcc") -> TargetReport:
    if not available(cc):
        raise BuildError(f"{cc} not found: install gcc-arm-none-eabi (Debian) for the cross-compile check")
    flags = TARGETS[target]
    tool = cc[: -len("gcc")]
    with tempfile.TemporaryDirectory(prefix="pfcrig-target-") as tmp:
        src = Path(tmp) / "src"
        src.mkdir()
        for name, text in files.items():
            (src / name).write_text(text)
        objs = compile_objects(src, Path(tmp) / "obj", cc=cc, flags=flags)
        size = subprocess.run([tool + "size", *map(str, objs)], capture_output=True, text=True, check=True).stdout
        text = data = bss = 0
        for line in size.splitlines()[1:]:
            parts = line.split()
            text, data, bss = text + int(parts[0]), data + int(parts[1]), bss + int(parts[2])
        probe = Path(tmp) / "probe.c"
        probe.write_text(f'#include "{prefix}_ctrl.h"\n{prefix}_ctrl_t {prefix}_probe_state;\n')
        pobj = Path(tmp) / "probe.o"
        subprocess.run([cc, *STRICT_FLAGS, *flags, "-fno-common", "-I", str(src), "-c", str(probe), "-o", str(pobj)],
                       check=True, capture_output=True)
        nm = subprocess.run([tool + "nm", "-S", str(pobj)], capture_output=True, text=True, check=True).stdout
        state = next(int(ln.split()[1], 16) for ln in nm.splitlines() if ln.endswith(f"{prefix}_probe_state"))
        nm_all = subprocess.run([tool + "nm", *map(str, objs)], capture_output=True, text=True, check=True).stdout
    defined = {ln.split()[-1] for ln in nm_all.splitlines() if re.match(r"^[0-9a-f]+ [TDRBC] ", ln)}
    undef = sorted({ln.split()[-1] for ln in nm_all.splitlines() if ln.strip().startswith("U ")} - defined)
    support = [u for u in undef if SUPPORT.match(u)]
    return TargetReport(target, flags, text, data + bss, state, [u for u in undef if u not in support], support)
