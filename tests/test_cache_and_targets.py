"""The build cache runs only what pfcrig built (content hashes recorded at build time) and
refuses a cache others may write to; a target whose answers leave the contract, or that
stays silent, ends with a clear error and a report."""

from __future__ import annotations

import json
import os
import pty

import numpy as np
import pytest

from codegen import build as B
from codegen.target import HOST_BUILD, build_target
from design.project import load_project
from harness.cli.main import main
from harness.targets import link
from harness.targets.pil import RemoteControllers

from .helpers import DEMO


@pytest.fixture
def own_cache(tmp_path, monkeypatch):
    root = tmp_path / "cache"
    monkeypatch.setenv("PFCRIG_CACHE", str(root))
    monkeypatch.setattr(B, "_LOADED", {})
    return root


def test_cache_refused_when_others_may_write_to_it(own_cache):
    own_cache.mkdir(mode=0o700)
    os.chmod(own_cache, 0o777)
    with pytest.raises(B.BuildError, match="writable by group or others"):
        B.cache_root()
    os.chmod(own_cache, 0o700)
    assert B.cache_root() == own_cache


def test_a_planted_or_damaged_extension_is_rebuilt_not_loaded(own_cache):
    files = {
        "t_x.h": "int t_one(void);\n",
        "t_x.c": "int t_one(void) { return 1; }\n",
        "t_config.h": "\n",
    }
    b = B.build(files, "t")
    assert b.lib.t_one() == 1
    so = b.path
    so.unlink()  # (a new file: the loaded one stays mapped in this process)
    so.write_bytes(b"\x7fELF truncated")  # a damaged (or planted) library at the same path
    assert not B.verified(so)
    B._LOADED.clear()
    b2 = B.build(files, "t")  # rebuilt: the hash no longer matches the one recorded
    assert b2.lib.t_one() == 1 and so.read_bytes()[:4] == b"\x7fELF" and len(so.read_bytes()) > 100
    so.unlink()  # deleted: rebuilt too, no StopIteration
    B._LOADED.clear()
    assert B.build(files, "t").lib.t_one() == 1


def test_a_file_planted_at_the_host_target_path_is_not_run(own_cache):
    prj = load_project(DEMO)
    exe = build_target(prj, HOST_BUILD)
    exe.write_text("#!/bin/sh\necho planted > planted.txt\n")
    exe.chmod(0o755)
    again = build_target(prj, HOST_BUILD)
    assert again == exe and b"planted" not in exe.read_bytes()


class Liar:
    """A target that answers HELLO and RESET properly, then one STEP with a mode byte the
    contract does not have."""

    def __init__(self, prj):
        self.prj, self.out = prj, b""

    def write(self, data):
        frames = link.Decoder().feed(data)
        for f in frames:
            if f.ftype == link.HELLO:
                fmt = 1 if self.prj.config.control.number_format == "q15" else 0
                body = (
                    bytes([1, fmt])
                    + (184).to_bytes(2, "little")
                    + self.prj.config.digest().encode()
                    + b"pfc"
                )
                self.out += link.encode(f.ftype | link.ACK, f.seq, body)
            elif f.ftype == link.RESET:
                self.out += link.encode(f.ftype | link.ACK, f.seq)
            elif f.ftype == link.STEP:
                self.out += link.encode(f.ftype | link.ACK, f.seq, bytes([1, 0, 0, 0, 9, 0, 0, 0]))

    def read(self, timeout_s):
        out, self.out = self.out, b""
        return out


def test_an_answer_outside_the_contract_is_named():
    prj = load_project(DEMO)
    ctl = RemoteControllers(link.Session(Liar(prj), timeout_s=0.2), prj)
    with pytest.raises(link.LinkError, match="target differs at period 0: mode = 9"):
        ctl.step(np.zeros((1, 3), dtype=np.uint16))


def test_a_target_silent_at_hello_still_gets_its_report(tmp_path):
    master, slave = pty.openpty()  # a port nothing answers on
    try:
        out = tmp_path / "p.json"
        code = main(
            [
                "pil",
                str(DEMO),
                "--target",
                "serial",
                "--port",
                os.ttyname(slave),
                "--timeout",
                "0.2",
                "--duration",
                "0.01",
                "--json",
                str(out),
            ]
        )
    finally:
        os.close(master)
        os.close(slave)
    assert code == 1
    doc = json.loads(out.read_text())
    assert doc["periods"] == 0 and "before the first period" in doc["aborted"]
