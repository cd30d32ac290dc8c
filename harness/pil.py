"""Processor-in-the-loop: the generated controller inside the link's target shell, on
another process (host port), on QEMU's emulated Cortex-M4F (mps2-an386 port) or on a
board behind a serial port; the harness drives it in lockstep through ``harness.link``
and compares it with the in-process run period by period.

Transports (each ``write(bytes)``, ``read(timeout_s) -> bytes``, ``close()``):
``PipeTransport`` (a child's stdin/stdout: the host port) and ``SerialTransport``
(pyserial: a real port such as ``/dev/ttyUSB0``, a pseudo-terminal, or any pyserial URL
such as ``socket://127.0.0.1:4000``; a TCP serial server should send small writes at once,
e.g. QEMU's ``-serial tcp:...,server=on,nodelay=on``, or every answer waits for a delayed
acknowledgement).  QEMU's UART is put on a pseudo-terminal and read
through ``SerialTransport``, the same code a real board uses.
"""
from __future__ import annotations

import hashlib
import os
import re
import select
import shutil
import socket
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from codegen.build import HOST_FLAGS, BuildError, cache_root, compile_objects
from codegen.render import render_link

from . import link
from .loop import PWM_DTYPE, RunResult, run
from .project import Project, render_of
from .scenario import Scenario

TARGETS = ("host", "qemu-m4f", "serial")
FLOAT32_INSN_LIMIT = 1000  # worst-case instructions per step on the Cortex-M4F (issue target, float32)


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
        _stop(self.proc)


class SerialTransport:
    """A serial port through pyserial: a device path (``/dev/ttyUSB0``, a pseudo-terminal)
    or a pyserial URL (``socket://HOST:PORT``, ``rfc2217://...``); 8N1, no flow control."""

    def __init__(self, port: str, baud: int = 115200, proc: subprocess.Popen | None = None):
        import serial

        try:
            self.ser = serial.serial_for_url(port, baudrate=baud, timeout=0.0, write_timeout=2.0)
        except (serial.SerialException, ValueError) as exc:
            raise link.LinkError(f"cannot open serial port {port!r} at {baud} baud: {exc}") from None
        self.ser.reset_input_buffer()
        sock = getattr(self.ser, "_socket", None)  # a socket:// port: one frame per request, send it now
        if sock is not None:
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.port, self.baud, self.proc = port, baud, proc

    def write(self, data: bytes) -> None:
        import serial

        try:
            self.ser.write(data)
            self.ser.flush()
        except serial.SerialException as exc:
            raise link.LinkError(f"write to {self.port} failed: {exc}") from None

    def read(self, timeout_s: float) -> bytes:
        import serial

        try:
            self.ser.timeout = max(timeout_s, 0.0)
            first = self.ser.read(1)  # waits up to the timeout for the first byte
            if not first:
                if self.proc is not None and self.proc.poll() is not None:
                    raise link.LinkError(f"the target process exited with status {self.proc.returncode}")
                return b""
            return first + self.ser.read(self.ser.in_waiting)
        except serial.SerialException as exc:
            raise link.LinkError(f"read from {self.port} failed: {exc}") from None

    def close(self) -> None:
        try:
            self.ser.close()
        finally:
            if self.proc is not None:
                _stop(self.proc)


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
    try:
        proc.wait(timeout=2.0)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


# -- building the targets ----------------------------------------------------------------
@dataclass(frozen=True)
class TargetBuild:
    """How one kind of target image is compiled and linked."""

    name: str
    cc: str
    flags: list[str]
    port: dict  # keyword arguments of ``render_link``
    link_args: list[str] = field(default_factory=list)  # {ld} stands for the rendered linker script
    suffix: str = ""


HOST_BUILD = TargetBuild("host", "gcc", [f for f in HOST_FLAGS if f != "-fPIC"], {"host_main": True})


def qemu_build() -> TargetBuild:
    from codegen.target import TARGETS as CROSS

    flags = CROSS["cortex-m4f"]
    return TargetBuild("qemu-m4f", "arm-none-eabi-gcc", flags, {"port": "mps2_an386"},
                       [*flags, "-nostdlib", "-T", "{ld}"], "_mps2_an386.elf")


def build_target(prj: Project, tb: TargetBuild) -> Path:
    """Compile controller + target shell + port with the strict flags and link them; cached
    by the hash of the sources and flags."""
    if shutil.which(tb.cc) is None:
        raise BuildError(f"{tb.cc} not found" + (": install gcc-arm-none-eabi (Debian)" if "arm" in tb.cc else ""))
    p = prj.config.control.prefix
    files = {**render_of(prj), **render_link(prj.config, **tb.port)}
    h = hashlib.sha256("".join(files[k] for k in sorted(files)).encode())
    h.update(" ".join([tb.cc, *tb.flags, *tb.link_args]).encode())
    exe = cache_root() / "pil" / f"{p}_{h.hexdigest()[:16]}{tb.suffix}"
    if exe.exists():
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
        r = subprocess.run([tb.cc, *args, *map(str, objs), "-o", str(out), *(["-lgcc"] if tb.link_args else [])],
                           capture_output=True, text=True)
        if r.returncode:
            raise BuildError(f"link of the {tb.name} target failed:\n{r.stderr}")
        os.replace(out, exe)
    return exe


def build_host_target(prj: Project) -> Path:
    return build_target(prj, HOST_BUILD)


def build_qemu_target(prj: Project) -> Path:
    """The Cortex-M4F image (hard float, strict flags) that QEMU's mps2-an386 boots."""
    return build_target(prj, qemu_build())


def image_size(elf: Path) -> dict:
    """Flash (text + data) and static RAM (data + bss) of a linked image, by ``size``."""
    out = subprocess.run(["arm-none-eabi-size", str(elf)], capture_output=True, text=True, check=True).stdout
    text, data, bss = (int(x) for x in out.splitlines()[1].split()[:3])
    return {"flash_B": text + data, "ram_B": data + bss, "text_B": text, "data_B": data, "bss_B": bss}


# -- starting them -----------------------------------------------------------------------
# -icount shift=0: virtual time advances 1 ns per instruction, so the SysTick the port reads
# counts instructions (the port calibrates the ratio at boot against a known loop)
QEMU_CMD = ["qemu-system-arm", "-M", "mps2-an386", "-nographic", "-monitor", "none", "-icount", "shift=0",
            "-serial", "pty"]
PTY_LINE = re.compile(rb"char device redirected to (/dev/\S+)")


def _qemu_pty(proc: subprocess.Popen, timeout_s: float = 10.0) -> str:
    """The pseudo-terminal QEMU announces for its UART."""
    deadline = time.monotonic() + timeout_s
    fd = proc.stdout.fileno()
    seen = b""
    while time.monotonic() < deadline:
        r, _, _ = select.select([fd], [], [], 0.1)
        if r:
            chunk = os.read(fd, 4096)
            seen += chunk
            m = PTY_LINE.search(seen)
            if m:
                return m.group(1).decode()
            if not chunk and proc.poll() is not None:
                break
    _stop(proc)
    raise link.LinkError(f"QEMU did not announce its serial pseudo-terminal within {timeout_s:g} s: "
                         f"{seen.decode(errors='replace').strip()!r}")


def open_target(prj: Project, target: str, port: str | None = None, baud: int = 115200):
    """Build and start ``target``; returns (transport, the cross-compiled image or None):
    ``host`` (child process), ``qemu-m4f`` (QEMU, its UART on a pseudo-terminal through
    pyserial) or ``serial`` (a board already running the target image, on ``port``)."""
    if target == "host":
        proc = subprocess.Popen([str(build_host_target(prj))], stdin=subprocess.PIPE, stdout=subprocess.PIPE)
        return PipeTransport(proc), None
    if target == "qemu-m4f":
        if shutil.which(QEMU_CMD[0]) is None:
            raise BuildError("qemu-system-arm not found: install qemu-system-arm (Debian)")
        elf = build_qemu_target(prj)
        proc = subprocess.Popen([*QEMU_CMD, "-kernel", str(elf)], stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                stderr=subprocess.STDOUT)
        return SerialTransport(_qemu_pty(proc), baud, proc=proc), elf
    if target == "serial":
        if not port:
            raise ValueError("--target serial needs --port (a device such as /dev/ttyUSB0, or a pyserial URL)")
        return SerialTransport(port, baud), None
    raise ValueError(f"unknown target {target!r}: one of {', '.join(TARGETS)}")


class RemoteControllers:
    """One controller behind the link, with the interface ``harness.loop`` drives."""

    def __init__(self, session: link.Session, prj: Project):
        self.s = session
        self.n = 1
        hello = session.hello()
        if hello.digest != prj.config.digest() or hello.prefix != prj.config.control.prefix:
            raise link.LinkError(f"target runs config {hello.digest} ({hello.prefix}), expected "
                                 f"{prj.config.digest()} ({prj.config.control.prefix}): rebuild the target")
        if hello.number_format != prj.config.control.number_format:
            raise link.LinkError(f"target runs the {hello.number_format} build, the config asks for "
                                 f"{prj.config.control.number_format}")
        self.hello = hello
        session.reset()
        self._nan = np.full((1, 4), np.nan, dtype=np.float32)

    def step(self, codes: np.ndarray) -> np.ndarray:
        (cmp_, gates, mode, faults), = self.s.step(codes[:1])
        return np.array([(cmp_, gates, mode, faults)], dtype=PWM_DTYPE)

    def internals(self) -> np.ndarray:
        return self._nan  # not carried over the link

    def state(self, k: int = 0) -> bytes:
        return self.s.snapshot()


@dataclass
class Comparison:
    periods: int
    equal: bool
    first_difference: dict | None
    final_state_equal: bool | None = None  # raw controller state after the last period


def compare_outputs(a: RunResult, b: RunResult) -> Comparison:
    """Period-by-period comparison of the controller outputs of two runs, and of the final
    controller state where both runs kept it."""
    n = min(a.periods, b.periods)
    sa, sb = a.extras.get("final_states"), b.extras.get("final_states")
    same_state = None if not (sa and sb) else sa[0] == sb[0]
    for k in range(n):
        for f in ("compare", "gates", "mode", "faults"):
            if a.data[f][k, 0] != b.data[f][k, 0]:
                return Comparison(n, False, {"period": k, "t_s": float(a.data["t_s"][k, 0]), "field": f,
                                             "reference": float(a.data[f][k, 0]), "target": float(b.data[f][k, 0])},
                                  same_state)
    return Comparison(n, n == a.periods == b.periods and same_state is not False, None, same_state)


@dataclass
class PilRun:
    result: RunResult
    link_stats: dict
    wall_s: float
    cost: dict | None = None  # instructions per step on the target (None: the target has no counter)
    image: dict | None = None  # flash/RAM of the target image, where one was built


def run_pil(prj: Project, scn: Scenario, target: str = "host", timeout_s: float = 2.0, model: str = "switching",
            port: str | None = None, baud: int = 115200) -> PilRun:
    """Run ``scn`` with the controller on ``target`` over the link."""
    tr, elf = open_target(prj, target, port, baud)
    sess = link.Session(tr, timeout_s=timeout_s)
    t0 = time.perf_counter()
    cost = None
    try:
        ctl = RemoteControllers(sess, prj)
        res = run(prj, [scn], model=model, progress=False, controllers=ctl)
        if "aborted" not in res.extras:
            res.extras["final_states"] = [ctl.state()]
            cost = sess.cost().instructions()
    finally:
        tr.close()
    image = image_size(elf) if elf is not None else None
    return PilRun(res, dict(sess.stats), time.perf_counter() - t0, cost, image)
