"""The lockstep link: encoder/decoder properties (hypothesis) and a host-process target."""

from __future__ import annotations

import os
import signal
import subprocess

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from codegen.target import HOST_BUILD, build_target
from design.project import from_config
from harness.closedloop.loop import run
from harness.closedloop.scenario import Scenario
from harness.targets import link
from harness.targets.pil import (
    FLOAT32_INSN_LIMIT,
    PipeTransport,
    RemoteControllers,
    compare_outputs,
    run_pil,
)

frames = st.lists(
    st.tuples(st.sampled_from([1, 2, 3, 0x81, 0x83]), st.integers(0, 255), st.binary(max_size=60)),
    min_size=1,
    max_size=8,
)


def test_crc_check_value():
    # CRC-16/CCITT-FALSE check value over "123456789" is 0x29B1 (published catalogue of CRCs)
    assert link.crc16(b"123456789") == 0x29B1


@settings(max_examples=200, deadline=None)
@given(frames, st.integers(1, 7))
def test_round_trip_in_any_chunking(fs, chunk):
    data = b"".join(link.encode(t, q, p) for t, q, p in fs)
    d = link.Decoder()
    got = []
    for i in range(0, len(data), chunk):
        got += d.feed(data[i : i + chunk])
    assert [(f.ftype, f.seq, f.payload) for f in got] == fs and d.dropped == 0


@settings(max_examples=300, deadline=None)
@given(frames, st.data())
def test_corruption_never_passes_as_a_good_frame(fs, data):
    wire = bytearray(b"".join(link.encode(t, q, p) for t, q, p in fs))
    pos = data.draw(st.integers(0, len(wire) - 1))
    flip = data.draw(st.integers(1, 255))
    wire[pos] ^= flip
    got = link.Decoder().feed(bytes(wire))
    sent = [(t, q, p) for t, q, p in fs]
    # every frame that comes out is one that was sent: the damaged one is dropped (a single
    # changed byte is always caught by a 16-bit CRC), the others survive
    assert all((f.ftype, f.seq, f.payload) in sent for f in got)
    assert len(got) < len(fs)


@settings(max_examples=100, deadline=None)
@given(frames, st.data())
def test_truncation_is_never_delivered(fs, data):
    wire = b"".join(link.encode(t, q, p) for t, q, p in fs)
    cut = data.draw(st.integers(0, len(wire) - 1))
    got = link.Decoder().feed(wire[:cut])
    assert len(got) < len(fs)


class FakeTarget:
    """Answers in memory, optionally duplicating or reordering its answers."""

    def __init__(self, mode="ok"):
        self.mode, self.queue, self.last = mode, [], None

    def write(self, data):
        f = link.Decoder().feed(data)[0]
        ans = link.encode(
            f.ftype | link.ACK,
            f.seq,
            bytes([1]) + b"\x00" * link.STEP_OUT_BYTES if f.ftype == link.STEP else b"",
        )
        if self.mode == "duplicate":
            self.queue += [ans, ans]
        elif self.mode == "reorder" and self.last is not None:
            self.queue.append(self.last)  # answers the previous request instead
        elif self.mode == "silent":
            pass
        else:
            self.queue.append(ans)
        self.last = ans

    def read(self, timeout_s):
        return self.queue.pop(0) if self.queue else b""


def test_duplicated_answer_is_skipped_by_sequence():
    s = link.Session(FakeTarget("duplicate"), timeout_s=0.2)
    for _ in range(3):
        assert s.step([(1, 2, 3)]) == [(0, 0, 0, 0, 0)]


def test_stale_answer_detected_and_silent_target_times_out():
    s = link.Session(FakeTarget("reorder"), timeout_s=0.05, retries=0)
    s.step([(1, 2, 3)])
    with pytest.raises(TimeoutError):
        s.step([(1, 2, 3)])  # only the old answer comes back: not accepted
    s = link.Session(FakeTarget("silent"), timeout_s=0.05, retries=1)
    with pytest.raises(TimeoutError, match="no answer"):
        s.hello()


@pytest.mark.slow
@pytest.mark.parametrize("fmt", ["float32", "q15"])
def test_host_process_pil_equals_in_process(demo_project, fmt):
    prj = from_config(demo_project.config.replace("control", number_format=fmt))
    s = Scenario(
        duration_s=0.16, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    pil = run_pil(prj, s, "host")
    ref = run(prj, [s], progress=False)
    cmp_ = compare_outputs(ref, pil.result)
    assert cmp_.periods >= 10000 and cmp_.equal, cmp_.first_difference
    assert cmp_.final_state_equal is True  # the SNAPSHOT bytes equal the in-process state
    assert pil.link_stats["bad_crc"] == 0 and pil.link_stats["retries"] == 0
    assert pil.cost is None  # the host port has no counter: no cost is made up


def test_target_that_stops_answering(demo_project):
    exe = build_target(demo_project, HOST_BUILD)
    proc = subprocess.Popen([str(exe)], stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    tr = PipeTransport(proc)
    try:
        sess = link.Session(tr, timeout_s=0.3, retries=1)
        ctl = RemoteControllers(sess, demo_project)

        class Freezing:
            n = 1

            def __init__(self):
                self.k = 0

            def step(self, codes):
                self.k += 1
                if self.k == 500:
                    os.kill(proc.pid, signal.SIGSTOP)  # the target hangs mid-run
                return ctl.step(codes)

            def internals(self):
                return ctl.internals()

        s = Scenario(
            duration_s=0.05, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
        )
        res = run(demo_project, [s], progress=False, controllers=Freezing())
        assert (
            "stopped at period 499" in res.extras["aborted"]
            and "no answer" in res.extras["aborted"]
        )
        assert res.periods == 499 and len(res.data["t_s"]) == 499  # the partial record is kept
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()


def test_target_shell_cross_compiles_needing_only_the_board_functions(demo_project):
    from codegen import target
    from codegen.render import render, render_link

    if not target.available():
        pytest.skip("arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)")
    rep = target.check({**render(demo_project), **render_link(demo_project)}, "pfc", "cortex-m4f")
    assert rep.undefined == ["pfc_link_flush", "pfc_link_getc", "pfc_link_putc", "pfc_link_ticks"]


QEMU = __import__("shutil").which("qemu-system-arm") is not None


@pytest.mark.slow
@pytest.mark.skipif(not QEMU, reason="qemu-system-arm not installed (Debian: qemu-system-arm)")
@pytest.mark.parametrize("fmt", ["float32", "q15"])
def test_qemu_m4f_pil_equals_in_process(demo_project, fmt):
    """The image as arm-none-eabi-gcc builds it, on the emulated Cortex-M4F: every output of
    10 400 periods (8 line cycles) equals the in-process run (FP contraction off on both)."""
    from codegen import target

    if not target.available():
        pytest.skip("arm-none-eabi-gcc not installed")
    prj = from_config(demo_project.config.replace("control", number_format=fmt))
    s = Scenario(
        duration_s=0.16, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
    )
    pil = run_pil(prj, s, "qemu-m4f", timeout_s=5.0)
    ref = run(prj, [s], progress=False)
    cmp_ = compare_outputs(ref, pil.result)
    assert cmp_.periods >= 10000 and cmp_.equal, cmp_.first_difference
    assert cmp_.final_state_equal is True
    # cost on the core: the calibration loop (2 instructions x 50 000) and the step counts must
    # be consistent; float32 has the budget of 1000 instructions per step, worst case
    c = pil.cost
    assert c is not None and c["steps"] == cmp_.periods
    assert (
        c["min"] <= c["mean"] <= c["max"] and c["min"] > 50
    )  # a real step is more than a few instructions
    if fmt == "float32":
        assert c["max"] <= FLOAT32_INSN_LIMIT, c
    assert 0 < pil.image["flash_B"] < 64 * 1024 and pil.image["ram_B"] > 0


def test_cost_counts_to_instructions():
    # hand arithmetic: 100 000 calibration instructions in 2 500 ticks is 40 per tick; 10 steps
    # summing 130 ticks with 1 tick per empty measurement: (13 - 1) x 40 = 480 mean,
    # (20 - 1) x 40 = 760 max, (9 - 1) x 40 = 320 min
    import struct

    c = link.parse_cost(struct.pack("<8I", 10, 130, 0, 20, 9, 1, 100000, 2500))
    got = c.instructions()
    assert got["instructions_per_tick"] == 40.0
    assert (got["mean"], got["max"], got["min"]) == (480.0, 760.0, 320.0)
    # a sum past 32 bits is carried in the high word
    assert link.parse_cost(struct.pack("<8I", 1, 5, 1, 0, 0, 0, 0, 0)).tick_sum == (1 << 32) + 5
    # no counter on the target: no figure
    assert link.parse_cost(struct.pack("<8I", 10, 0, 0, 0, 0, 0, 0, 0)).instructions() is None


class HostBehindPty:
    """The host target with a pseudo-terminal's master as its stdin/stdout: its slave is a
    serial port as pyserial sees one, so the serial transport runs without hardware."""

    def __init__(self, prj):
        exe = build_target(prj, HOST_BUILD)
        self.master, slave = os.openpty()
        self.port = os.ttyname(slave)
        self.proc = subprocess.Popen([str(exe)], stdin=self.master, stdout=self.master)
        self.slave = slave  # kept open until the transport has opened the port

    def close(self):
        os.close(self.slave)
        self.proc.kill()
        self.proc.wait()
        os.close(self.master)


def test_serial_transport_snapshot_and_cost_on_a_pty(demo_project):
    from harness.targets.pil import SerialTransport

    tgt = HostBehindPty(demo_project)
    tr = SerialTransport(tgt.port, 115200)
    try:
        sess = link.Session(tr, timeout_s=1.0)
        ctl = RemoteControllers(sess, demo_project)
        s = Scenario(
            duration_s=0.01, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
        )
        res = run(demo_project, [s], progress=False, controllers=ctl)
        ref = run(demo_project, [s], progress=False)
        snap = ctl.state()
        assert (
            snap == ref.extras["final_states"][0]
        )  # the state read in 256-byte pieces, byte for byte
        import struct

        for off in (100, len(snap), len(snap) + 7):  # a piece from an offset; nothing past the end
            f = sess.request(link.SNAPSHOT, struct.pack("<H", off))
            assert (
                struct.unpack_from("<HH", f.payload) == (len(snap), off)
                and f.payload[4:] == snap[off:]
            )
        assert compare_outputs(ref, res).equal
        cost = sess.cost(clear=True)
        assert cost.steps == res.periods and cost.tick_sum == 0 and cost.instructions() is None
        assert sess.cost().steps == 0  # cleared
    finally:
        tr.close()
        tgt.close()


@pytest.mark.slow
def test_pil_cli_over_a_serial_port(demo_path, tmp_path):
    """``pfcrig pil --target serial --port`` against a target behind a serial port: same
    report as the other targets, outputs equal to the in-process run."""
    import json

    from design.project import load_project
    from harness.cli import main

    tgt = HostBehindPty(load_project(demo_path))
    try:
        out = tmp_path / "pil.json"
        code = main(
            [
                "pil",
                str(demo_path),
                "--target",
                "serial",
                "--port",
                tgt.port,
                "--baud",
                "230400",
                "--duration",
                "0.06",
                "--json",
                str(out),
            ]
        )
        doc = json.loads(out.read_text())
    finally:
        tgt.close()
    assert code == 0
    assert doc["equivalence"]["equal"] and doc["equivalence"]["final_state_equal"]
    assert doc["port"] == tgt.port and doc["baud"] == 230400 and doc["link"]["bad_crc"] == 0
    assert {
        "pf",
        "thd_i",
        "vbus_mean_V",
        "class_a_pass",
    } <= doc.keys()  # the figures `pfcrig run` reports


def test_serial_target_needs_a_port_and_a_dead_port_is_a_clear_error(demo_path, capsys):
    from harness.cli import main

    assert main(["pil", str(demo_path), "--target", "serial"]) == 2
    assert "--port" in capsys.readouterr().err
    assert (
        main(["pil", str(demo_path), "--target", "serial", "--port", "/dev/pfcrig-no-such-port"])
        == 1
    )
    assert "cannot open serial port" in capsys.readouterr().err


def test_silent_serial_target_times_out(demo_project):
    """A port with nothing behind it answering: a clear error within the timeout, no hang."""
    import time

    from harness.targets.pil import SerialTransport

    master, slave = os.openpty()
    tr = SerialTransport(os.ttyname(slave))
    try:
        sess = link.Session(tr, timeout_s=0.2, retries=1)
        t0 = time.monotonic()
        with pytest.raises(TimeoutError, match="no answer"):
            RemoteControllers(sess, demo_project)
        assert time.monotonic() - t0 < 2.0
    finally:
        tr.close()
        os.close(slave)
        os.close(master)


def test_pil_cli_writes_the_partial_report_when_the_target_stops(demo_path, tmp_path, capsys):
    """A board that stops answering mid-run: exit status 1 within the timeout, a clear error,
    and the JSON report of the periods run so far."""
    import json
    import threading

    from design.project import load_project
    from harness.cli import main

    tgt = HostBehindPty(load_project(demo_path))
    freeze = threading.Timer(0.4, lambda: os.kill(tgt.proc.pid, signal.SIGSTOP))
    try:
        out = tmp_path / "pil.json"
        freeze.start()
        code = main(
            [
                "pil",
                str(demo_path),
                "--target",
                "serial",
                "--port",
                tgt.port,
                "--duration",
                "2.0",
                "--timeout",
                "0.2",
                "--json",
                str(out),
            ]
        )
        doc = json.loads(out.read_text())
    finally:
        freeze.cancel()
        tgt.close()
    assert code == 1
    assert "no answer" in doc["aborted"] and "no answer" in capsys.readouterr().err
    assert 0 < doc["periods"] < 2.0 * 65000  # stopped part-way, what was run is reported


@pytest.mark.slow
@pytest.mark.skipif(not QEMU, reason="qemu-system-arm not installed (Debian: qemu-system-arm)")
def test_qemu_m4f_over_a_loopback_socket(demo_path, tmp_path):
    """The emulated board's UART on a loopback TCP socket, reached as a pyserial URL by
    ``pfcrig pil --target serial --port socket://...``: same outputs, same state, a cost."""
    import json
    import socket
    import time

    from codegen import target
    from codegen.target import QEMU_M4F_BUILD, build_target
    from design.project import load_project
    from harness.cli import main
    from harness.targets.pil import QEMU_CMD

    if not target.available():
        pytest.skip("arm-none-eabi-gcc not installed")
    elf = build_target(load_project(demo_path), QEMU_M4F_BUILD)
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    cmd = [a for a in QEMU_CMD if a not in ("-serial", "pty")] + ["-M", "mps2-an386"]
    q = subprocess.Popen(
        [
            *cmd,
            "-serial",
            f"tcp:127.0.0.1:{port},server=on,wait=off,nodelay=on",
            "-kernel",
            str(elf),
        ],
        stdin=subprocess.DEVNULL,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        for _ in range(100):  # until QEMU listens
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.1).close()
                break
            except OSError:
                time.sleep(0.05)
        out = tmp_path / "pil.json"
        code = main(
            [
                "pil",
                str(demo_path),
                "--target",
                "serial",
                "--port",
                f"socket://127.0.0.1:{port}",
                "--duration",
                "0.03",
                "--timeout",
                "5",
                "--json",
                str(out),
            ]
        )
        doc = json.loads(out.read_text())
    finally:
        q.kill()
        q.wait()
    assert code == 0 and doc["equivalence"]["equal"] and doc["equivalence"]["final_state_equal"]
    assert doc["cost_on_target"]["steps"] == doc["periods"] and doc["cost_on_target"]["max"] > 0


def test_reset_over_the_link_does_not_clear_a_sensor_fault(demo_project):
    """A link is no fault-clear request (sensor-fault safety): RESET of a controller in a
    sensor fault is answered ERROR REFUSED and the controller stays in the fault; a fresh
    controller is reset as before."""
    from design.contract import Mode
    from harness.targets.pil import SerialTransport

    tgt = HostBehindPty(demo_project)
    tr = SerialTransport(tgt.port, 115200)
    try:
        sess = link.Session(tr, timeout_s=1.0)
        sess.reset()  # a fresh controller: accepted
        r = demo_project.resolved
        full = r.adc_full_counts
        # the bus channel at its top rail: a sensor fault (bus rail) after rail_periods
        codes = [(int(r.vac_offset_counts), int(r.il_offset_counts), full)] * (
            demo_project.config.sensing.rail_periods + 4
        )
        out = sess.step(codes)
        assert out[-1][2] == Mode.SENSOR_FAULT
        with pytest.raises(link.LinkError, match="refused"):
            sess.reset()
        ok = [(int(r.vac_offset_counts), int(r.il_offset_counts), 0)]
        assert sess.step(ok)[-1][2] == Mode.SENSOR_FAULT  # still in the fault
    finally:
        tr.close()
        tgt.close()
