"""The lockstep link: encoder/decoder properties (hypothesis) and a host-process target."""
from __future__ import annotations

import os
import signal
import subprocess

import pytest
from hypothesis import given, settings, strategies as st

from harness import link
from harness.loop import run
from harness.pil import PipeTransport, RemoteControllers, build_host_target, compare_outputs, run_pil
from harness.project import from_config
from harness.scenario import Scenario

frames = st.lists(st.tuples(st.sampled_from([1, 2, 3, 0x81, 0x83]), st.integers(0, 255), st.binary(max_size=60)),
                  min_size=1, max_size=8)


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
        got += d.feed(data[i:i + chunk])
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
        ans = link.encode(f.ftype | link.ACK, f.seq, bytes([1]) + b"\x00" * 6 if f.ftype == link.STEP else b"")
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
        assert s.step([(1, 2, 3)]) == [(0, 0, 0, 0)]


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
    s = Scenario(duration_s=0.16, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0)
    res, stats, _ = run_pil(prj, s, "host")
    ref = run(prj, [s], progress=False)
    cmp_ = compare_outputs(ref, res)
    assert cmp_.periods >= 10000 and cmp_.equal, cmp_.first_difference
    assert stats["bad_crc"] == 0 and stats["retries"] == 0


def test_target_that_stops_answering(demo_project):
    exe = build_host_target(demo_project)
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

        s = Scenario(duration_s=0.05, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0)
        res = run(demo_project, [s], progress=False, controllers=Freezing())
        assert "stopped at period 499" in res.extras["aborted"] and "no answer" in res.extras["aborted"]
        assert res.periods == 499 and len(res.data["t_s"]) == 499  # the partial record is kept
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()


def test_target_shell_cross_compiles_needing_only_the_board_functions(demo_project):
    from codegen import target
    from codegen.render import render_link
    from harness.project import render_of

    if not target.available():
        pytest.skip("arm-none-eabi-gcc not installed (Debian: gcc-arm-none-eabi)")
    rep = target.check({**render_of(demo_project), **render_link(demo_project.config)}, "pfc", "cortex-m4f")
    assert rep.undefined == ["pfc_link_flush", "pfc_link_getc", "pfc_link_putc"]


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
    s = Scenario(duration_s=0.16, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0)
    res, stats, _ = run_pil(prj, s, "qemu-m4f", timeout_s=5.0)
    ref = run(prj, [s], progress=False)
    cmp_ = compare_outputs(ref, res)
    assert cmp_.periods >= 10000 and cmp_.equal, cmp_.first_difference
