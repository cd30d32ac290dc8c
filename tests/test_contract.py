"""The controller contract (design.contract) is the one source of the interface: every macro
the C must carry is rendered with the contract's value, the records' layouts match the C
structs as the compiler lays them out, and the link's host side uses the same numbers."""

from __future__ import annotations

import re

import numpy as np
import pytest

from codegen.render import render, render_host, render_link
from design import contract
from design.project import from_config
from harness.closedloop.loop import PWM_DTYPE
from harness.targets import link
from plant import layout


def _macros(files: dict[str, str], prefix: str) -> dict[str, int]:
    """Every integer macro ``#define PFX_NAME 12u`` / ``0x1Fu`` in the rendered files."""
    out: dict[str, int] = {}
    pat = rf"^#define {prefix.upper()}_([A-Z0-9_]+) (0x[0-9A-Fa-f]+|\d+)u\b"
    for text in files.values():
        for name, value in re.findall(pat, text, re.M):
            v = int(value, 0)
            assert out.get(name, v) == v, f"{name} defined twice, differently"
            out[name] = v
    return out


@pytest.mark.parametrize("fmt", ["float32", "q15"])
def test_every_contract_macro_is_rendered_with_its_value(demo_project, fmt):
    prj = from_config(demo_project.config.replace("control", number_format=fmt))
    files = {**render(prj), **render_host(prj), **render_link(prj)}
    found = _macros(files, "pfc")
    want = contract.macros()
    missing = sorted(set(want) - set(found))
    wrong = {k: (found[k], v) for k, v in want.items() if k in found and found[k] != v}
    assert not missing and not wrong, (missing, wrong)
    fmt_line = f"#define PFC_NUMBER_FORMAT PFC_FORMAT_{fmt.upper()}"
    assert fmt_line in files["pfc_types.h"]


def test_records_match_the_compiled_structs(demo_built):
    """The numpy record of the outputs and the input layout against what the C compiler made
    of the structs (offsets and sizes through cffi)."""
    ffi = demo_built.ffi
    assert ffi.sizeof("pfc_pwm_t") == PWM_DTYPE.itemsize
    c_fields = dict(ffi.typeof("pfc_pwm_t").fields)
    for f in contract.OUTPUT_FIELDS:
        assert ffi.offsetof("pfc_pwm_t", f.name) == PWM_DTYPE.fields[f.name][1], f.name
        assert ffi.sizeof(c_fields[f.name].type) == np.dtype(f.dtype).itemsize, f.name
    assert [n for n, _ in ffi.typeof("pfc_adc_t").fields] == [f.name for f in contract.ADC_FIELDS]
    assert ffi.sizeof("pfc_adc_t") == 2 * len(contract.Channel)


def test_probe_order_follows_the_contract(demo_built):
    """The host build's probes come out in the contract's order: set known internals and read
    them back through the batch probe."""
    ffi, lib = demo_built.ffi, demo_built.lib
    c = ffi.new("pfc_ctrl_t *")
    lib.pfc_init(c)
    c.iloop.duty, c.iref.iref, c.vloop.vref, c.vloop.pcmd = 0.25, 7.5, 390.0, 1234.0
    out = ffi.new(f"float[{len(contract.PROBES)}]")
    lib.pfc_batch_probe(c, out, 1)
    got = dict(zip([p[0] for p in contract.PROBES], list(out), strict=True))
    assert got == {"duty": 0.25, "iref_A": 7.5, "vref_V": 390.0, "pcmd_W": 1234.0}


def test_host_side_reads_the_same_numbers():
    sof = bytes([contract.link_value("SOF0"), contract.link_value("SOF1")])
    assert link.SOF == sof  # noqa: SIM300
    assert (link.HELLO, link.RESET, link.STEP, link.SNAPSHOT, link.COST) == (1, 2, 3, 4, 5)
    # the largest payload: a count byte and MAX_STEPS periods of the widest record (a STEP
    # request with split line sensing)
    widest_in = contract.link_table(True)["STEP_IN_BYTES"][0]
    assert widest_in == 2 * len(contract.ADC_FIELDS_SPLIT) == 8
    step_bytes = max(widest_in, contract.link_value("STEP_OUT_BYTES"))
    assert link.MAX_PAYLOAD == 1 + link.MAX_STEPS_PER_FRAME * step_bytes  # noqa: SIM300
    # CRC-16/CCITT-FALSE check value of "123456789" is 0x29B1 (the catalogue of CRC parameters)
    assert link.crc16(b"123456789") == 0x29B1
    assert (layout.GATE_FAST_LO, layout.GATE_FAST_HI, layout.GATE_SLOW_LO, layout.GATE_SLOW_HI) == (
        1,
        2,
        4,
        8,
    )


def test_mode_edges_reach_every_mode_and_leave_the_latches_alone():
    """Every mode is reachable from WAIT_LINE along the allowed edges, and the latched modes
    have no way out but a fault-clear request (to WAIT_LINE) or init (LATCHED also into
    SENSOR_FAULT, when a non-finite state is found while latched)."""
    M = contract.Mode
    seen, todo = {M.WAIT_LINE}, [M.WAIT_LINE]
    while todo:
        m = todo.pop()
        for a, b in contract.MODE_EDGES:
            if a == m and b not in seen:
                seen.add(b)
                todo.append(b)
    assert seen == set(M)
    leaving = {e for e in contract.MODE_EDGES if e[0] in (M.LATCHED, M.SENSOR_FAULT)}
    assert leaving == {
        (M.LATCHED, M.SENSOR_FAULT),
        (M.LATCHED, M.WAIT_LINE),
        (M.SENSOR_FAULT, M.WAIT_LINE),
    }
