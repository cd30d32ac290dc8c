"""Processor-in-the-loop: the generated controller inside the link's target shell, on
another process (host port) and, later, other targets; the harness drives it in lockstep
through ``harness.link`` and compares it with the in-process run period by period."""
from __future__ import annotations

import os
import select
import subprocess
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from codegen.build import HOST_FLAGS, BuildError, cache_root, compile_objects
from codegen.render import render_link

from . import link
from .loop import PWM_DTYPE, RunResult, run
from .project import Project, render_of
from .scenario import Scenario


class PipeTransport:
    """Bytes to and from a child process's stdin/stdout."""

    def __init__(self, proc: subprocess.Popen):
        self.proc = proc
        self.fd = proc.stdout.fileno()
        os.set_blocking(self.fd, False)

    def write(self, data: bytes) -> None:
        try:
            self.proc.stdin.write(data)
            self.proc.stdin.flush()
        except BrokenPipeError:
            raise link.LinkError("the target process has exited") from None

    def read(self, timeout_s: float) -> bytes:
        r, _, _ = select.select([self.fd], [], [], max(timeout_s, 0.0))
        if not r:
            return b""
        try:
            data = os.read(self.fd, 65536)
        except BlockingIOError:
            return b""
        if not data and self.proc.poll() is not None:
            raise link.LinkError(f"the target process exited with status {self.proc.returncode}")
        return data

    def close(self) -> None:
        try:
            self.proc.stdin.close()
        except OSError:
            pass
        try:
            self.proc.wait(timeout=2.0)
        except subprocess.TimeoutExpired:
            self.proc.kill()


def build_host_target(prj: Project, cc: str = "gcc") -> Path:
    """Compile controller + target shell + host port (strict flags) into an executable."""
    files = {**render_of(prj), **render_link(prj.config, host_main=True)}
    import hashlib

    key = hashlib.sha256("".join(files[k] for k in sorted(files)).encode()).hexdigest()[:16]
    exe = cache_root() / "pil" / f"{prj.config.control.prefix}_{key}"
    if exe.exists():
        return exe
    exe.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(dir=cache_root()) as tmp:
        src = Path(tmp) / "src"
        src.mkdir()
        for n, t in files.items():
            (src / n).write_text(t)
        objs = compile_objects(src, Path(tmp) / "obj", cc=cc, flags=[f for f in HOST_FLAGS if f != "-fPIC"])
        out = Path(tmp) / "target"
        r = subprocess.run([cc, *map(str, objs), "-o", str(out)], capture_output=True, text=True)
        if r.returncode:
            raise BuildError(f"link of the host target failed:\n{r.stderr}")
        os.replace(out, exe)
    return exe


def build_qemu_target(prj: Project) -> Path:
    """Controller + target shell + the mps2-an386 port, cross-compiled (hard float for the
    Cortex-M4F, strict flags) and linked into an ELF that QEMU boots."""
    from codegen.target import TARGETS, available

    if not available():
        raise BuildError("arm-none-eabi-gcc not found: install gcc-arm-none-eabi (Debian)")
    p = prj.config.control.prefix
    files = {**render_of(prj), **render_link(prj.config, port="mps2_an386")}
    import hashlib

    key = hashlib.sha256("".join(files[k] for k in sorted(files)).encode()).hexdigest()[:16]
    elf = cache_root() / "pil" / f"{p}_{key}_mps2_an386.elf"
    if elf.exists():
        return elf
    elf.parent.mkdir(parents=True, exist_ok=True)
    flags = TARGETS["cortex-m4f"]
    with tempfile.TemporaryDirectory(dir=cache_root()) as tmp:
        src = Path(tmp) / "src"
        src.mkdir()
        for n, t in files.items():
            (src / n).write_text(t)
        objs = compile_objects(src, Path(tmp) / "obj", cc="arm-none-eabi-gcc", flags=flags)
        out = Path(tmp) / "fw.elf"
        r = subprocess.run(["arm-none-eabi-gcc", *flags, "-nostdlib", "-T", str(src / f"{p}_mps2_an386.ld"),
                            *map(str, objs), "-o", str(out), "-lgcc"], capture_output=True, text=True)
        if r.returncode:
            raise BuildError(f"link of the mps2-an386 image failed:\n{r.stderr}")
        os.replace(out, elf)
    return elf


QEMU_CMD = ["qemu-system-arm", "-M", "mps2-an386", "-nographic", "-monitor", "none",
            "-chardev", "stdio,id=link,signal=off", "-serial", "chardev:link"]


def start_target(prj: Project, target: str) -> subprocess.Popen:
    """Build the target for ``target`` ("host" or "qemu-m4f") and start it."""
    import shutil

    if target == "host":
        return subprocess.Popen([str(build_host_target(prj))], stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    if target == "qemu-m4f":
        if shutil.which(QEMU_CMD[0]) is None:
            raise BuildError("qemu-system-arm not found: install qemu-system-arm (Debian)")
        return subprocess.Popen([*QEMU_CMD, "-kernel", str(build_qemu_target(prj))], stdin=subprocess.PIPE,
                                stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
    raise ValueError(f"unknown target {target!r}")


class RemoteControllers:
    """One controller behind the link, with the interface ``harness.loop`` drives."""

    def __init__(self, session: link.Session, prj: Project):
        self.s = session
        self.n = 1
        hello = session.hello()
        if hello.digest != prj.config.digest() or hello.prefix != prj.config.control.prefix:
            raise link.LinkError(f"target runs config {hello.digest} ({hello.prefix}), expected "
                                 f"{prj.config.digest()} ({prj.config.control.prefix}): rebuild the target")
        self.hello = hello
        session.reset()
        self._nan = np.full((1, 4), np.nan, dtype=np.float32)

    def step(self, codes: np.ndarray) -> np.ndarray:
        (cmp_, gates, mode, faults), = self.s.step(codes[:1])
        return np.array([(cmp_, gates, mode, faults)], dtype=PWM_DTYPE)

    def internals(self) -> np.ndarray:
        return self._nan  # not carried over the link


@dataclass
class Comparison:
    periods: int
    equal: bool
    first_difference: dict | None


def compare_outputs(a: RunResult, b: RunResult) -> Comparison:
    """Period-by-period comparison of the controller outputs of two runs."""
    n = min(a.periods, b.periods)
    for k in range(n):
        for f in ("compare", "gates", "mode", "faults"):
            if a.data[f][k, 0] != b.data[f][k, 0]:
                return Comparison(n, False, {"period": k, "t_s": float(a.data["t_s"][k, 0]), "field": f,
                                             "reference": float(a.data[f][k, 0]), "target": float(b.data[f][k, 0])})
    return Comparison(n, n == a.periods == b.periods, None)


def run_pil(prj: Project, scn: Scenario, target: str = "host", timeout_s: float = 2.0, model: str = "switching"):
    """Run ``scn`` with the controller on ``target`` over the link; returns
    (RunResult, link statistics, wall seconds)."""
    proc = start_target(prj, target)
    tr = PipeTransport(proc)
    sess = link.Session(tr, timeout_s=timeout_s)
    t0 = time.perf_counter()
    try:
        ctl = RemoteControllers(sess, prj)
        res = run(prj, [scn], model=model, progress=False, controllers=ctl)
    finally:
        tr.close()
    return res, dict(sess.stats), time.perf_counter() - t0
