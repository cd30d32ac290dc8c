"""Processor-in-the-loop: the generated controller inside the link's target shell, on
another process (host port), on QEMU's emulated Cortex-M4F (mps2-an386 port) or on a
board behind a serial port; the harness drives it in lockstep through ``targets.link``
and compares it with the in-process run period by period.  QEMU's UART is put on a
pseudo-terminal and read through ``SerialTransport``, the same code a real board uses.
"""

from __future__ import annotations

import os
import re
import select
import shutil
import subprocess
import time
from dataclasses import dataclass

import numpy as np

from codegen.build import BuildError
from codegen.target import HOST_BUILD, QEMU_M3_BUILD, QEMU_M4F_BUILD, build_target, image_size
from design.contract import Fault, Gate, Mode, Status
from design.project import Project
from harness.closedloop.loop import PWM_DTYPE, RunResult, run
from harness.closedloop.scenario import Scenario

from . import link
from .transports import PipeTransport, SerialTransport, stop_process

TARGETS = ("host", "qemu-m4f", "qemu-m3", "serial")
# the emulated boards: target -> (QEMU machine, image build)
QEMU_TARGETS = {
    "qemu-m4f": ("mps2-an386", QEMU_M4F_BUILD),
    "qemu-m3": ("mps2-an385", QEMU_M3_BUILD),
}
ALL_GATES = int(sum(Gate))
ALL_FAULTS = int(sum(Fault))
ALL_STATUS = int(sum(Status))
FLOAT32_INSN_LIMIT = 1000  # worst-case instructions per step on the Cortex-M4F (float32 target)


# -- starting them -----------------------------------------------------------------------
# -icount shift=0: virtual time advances 1 ns per instruction, so the SysTick the port reads
# counts instructions (the port calibrates the ratio at boot against a known loop)
QEMU_CMD = [
    "qemu-system-arm",
    "-nographic",
    "-monitor",
    "none",
    "-icount",
    "shift=0",
    "-serial",
    "pty",
]
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
    stop_process(proc)
    raise link.LinkError(
        f"QEMU did not announce its serial pseudo-terminal within {timeout_s:g} s: "
        f"{seen.decode(errors='replace').strip()!r}"
    )


def qemu_transport(elf, machine: str, baud: int = 115200) -> SerialTransport:
    """Boot ``elf`` on QEMU's ``machine`` (an MPS2 board), its UART on a pseudo-terminal."""
    if shutil.which(QEMU_CMD[0]) is None:
        raise BuildError("qemu-system-arm not found: install qemu-system-arm (Debian)")
    proc = subprocess.Popen(
        [*QEMU_CMD, "-M", machine, "-kernel", str(elf)],
        stdin=subprocess.DEVNULL,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
    )
    return SerialTransport(_qemu_pty(proc), baud, proc=proc)


def open_target(prj: Project, target: str, port: str | None = None, baud: int = 115200):
    """Build and start ``target``; returns (transport, the cross-compiled image or None):
    ``host`` (child process), ``qemu-m4f`` / ``qemu-m3`` (QEMU's mps2-an386 / mps2-an385, the
    UART on a pseudo-terminal through pyserial) or ``serial`` (a board already running the
    target image, on ``port``)."""
    if target == "host":
        proc = subprocess.Popen(
            [str(build_target(prj, HOST_BUILD))], stdin=subprocess.PIPE, stdout=subprocess.PIPE
        )
        return PipeTransport(proc), None
    if target in QEMU_TARGETS:
        machine, tb = QEMU_TARGETS[target]
        if target == "qemu-m3" and prj.config.control.number_format != "q15":
            raise ValueError(
                "--target qemu-m3 (Cortex-M3, no FPU) runs the q15 build: set [control] "
                'number_format = "q15"'
            )
        elf = build_target(prj, tb)
        return qemu_transport(elf, machine, baud), elf
    if target == "serial":
        if not port:
            raise ValueError(
                "--target serial needs --port (a device such as /dev/ttyUSB0, or a pyserial URL)"
            )
        return SerialTransport(port, baud), None
    raise ValueError(f"unknown target {target!r}: one of {', '.join(TARGETS)}")


class RemoteControllers:
    """One controller behind the link, with the interface ``harness.loop`` drives."""

    def __init__(self, session: link.Session, prj: Project):
        self.s = session
        self.n = 1
        hello = session.hello()
        if hello.digest != prj.config.digest() or hello.prefix != prj.config.control.prefix:
            raise link.LinkError(
                f"target runs config {hello.digest} ({hello.prefix}), expected "
                f"{prj.config.digest()} ({prj.config.control.prefix}): rebuild the target"
            )
        if hello.number_format != prj.config.control.number_format:
            raise link.LinkError(
                f"target runs the {hello.number_format} build, the config asks for "
                f"{prj.config.control.number_format}"
            )
        self.hello = hello
        session.reset()
        self.period = 0
        self.period_counts = prj.resolved.pwm_period_counts
        self._nan = np.full((1, 4), np.nan, dtype=np.float32)

    def step(self, codes: np.ndarray) -> np.ndarray:
        ((cmp_, gates, mode, faults, status),) = self.s.step(codes[:1])
        self.period += 1
        for field, value, ok in (
            ("compare", cmp_, cmp_ <= self.period_counts),
            ("gates", gates, gates & ~ALL_GATES == 0),
            ("mode", mode, mode <= max(Mode)),
            ("faults", faults, faults & ~ALL_FAULTS == 0),
            ("status", status, status & ~ALL_STATUS == 0),
        ):
            if not ok:
                raise link.LinkError(
                    f"target differs at period {self.period - 1}: {field} = "
                    f"{value}, outside what the contract allows"
                )
        return np.array([(cmp_, gates, mode, faults, status)], dtype=PWM_DTYPE)

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
                return Comparison(
                    n,
                    False,
                    {
                        "period": k,
                        "t_s": float(a.data["t_s"][k, 0]),
                        "field": f,
                        "reference": float(a.data[f][k, 0]),
                        "target": float(b.data[f][k, 0]),
                    },
                    same_state,
                )
    return Comparison(n, n == a.periods == b.periods and same_state is not False, None, same_state)


@dataclass
class PilRun:
    result: RunResult
    link_stats: dict
    wall_s: float
    cost: dict | None = (
        None  # instructions per step on the target (None: the target has no counter)
    )
    image: dict | None = None  # flash/RAM of the target image, where one was built


def run_pil(
    prj: Project,
    scn: Scenario,
    target: str = "host",
    timeout_s: float = 2.0,
    model: str = "switching",
    port: str | None = None,
    baud: int = 115200,
) -> PilRun:
    """Run ``scn`` with the controller on ``target`` over the link."""
    tr, elf = open_target(prj, target, port, baud)
    return run_over(prj, scn, tr, elf, timeout_s, model)


def run_over(
    prj: Project, scn: Scenario, tr, elf=None, timeout_s: float = 2.0, model: str = "switching"
) -> PilRun:
    """Run ``scn`` with the controller behind the transport ``tr`` (closed at the end);
    ``elf``: the image it runs, for its size."""
    sess = link.Session(tr, timeout_s=timeout_s)
    t0 = time.perf_counter()
    cost = None
    try:
        ctl = RemoteControllers(sess, prj)  # HELLO and RESET: a silent target raises here
        res = run(prj, [scn], model=model, progress=False, controllers=ctl)
        if "aborted" not in res.extras:
            try:
                res.extras["final_states"] = [ctl.state()]
                cost = sess.cost().instructions()
            except (link.LinkError, TimeoutError) as exc:  # the run stands; say what failed
                res.extras["after_run_error"] = f"SNAPSHOT/COST: {exc}"
    finally:
        tr.close()
    image = image_size([elf]) if elf is not None else None
    return PilRun(res, dict(sess.stats), time.perf_counter() - t0, cost, image)
