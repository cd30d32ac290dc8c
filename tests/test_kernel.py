"""The plant kernel's own arithmetic: series against the math library, the carried line
phase against sin/cos of the phase itself, and the compiled kernel against the same code
run as plain Python."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys

import numpy as np
import pytest

from plant import layout as LY
from plant.jit import COMPILED
from plant.source import advance_phase, small_sin_cos


def test_small_angle_sin_cos_match_the_math_library():
    # reference: Python's math.sin/math.cos (the C library); the series is used up to 0.05 rad
    for x in np.linspace(-0.05, 0.05, 2001):
        s, c = small_sin_cos(float(x))
        assert abs(s - math.sin(x)) <= 2e-17 and abs(c - math.cos(x)) <= 2e-17
    s, c = small_sin_cos(0.3)  # beyond the series' range: the library itself
    assert (s, c) == (math.sin(0.3), math.cos(0.3))


def test_carried_phase_stays_on_the_unit_circle():
    """sin and cos of the line phase are carried from period to period by rotation; after many
    periods they must still be sin and cos of the phase (to rounding)."""
    lane = np.zeros((2, LY.LANE_ROWS))
    lane[:, LY.L_FREQ] = (50.0, 61.7)
    lane[:, LY.L_THETA] = (0.0, 2.0)
    lane[:, LY.L_S0], lane[:, LY.L_C0] = np.sin(lane[:, LY.L_THETA]), np.cos(lane[:, LY.L_THETA])
    T = 1.0 / 65000.0
    worst = 0.0
    for _ in range(3 * 1300):  # three line cycles at 50 Hz, including wraps of the phase
        for j in range(2):
            advance_phase(lane, j, T)
        th = lane[:, LY.L_THETA]
        worst = max(
            worst,
            np.max(np.abs(lane[:, LY.L_S0] - np.sin(th))),
            np.max(np.abs(lane[:, LY.L_C0] - np.cos(th))),
        )
        assert np.all((th >= 0.0) & (th < 2.0 * math.pi))
    assert worst < 1e-12, worst


def test_zeros_mapped_is_zero_and_writable():
    from harness.closedloop.loop import PWM_DTYPE, zeros_mapped

    a = zeros_mapped((300, 1000, 3), np.float64)  # 7.2 MB: mapped
    assert a.shape == (300, 1000, 3) and not a.any()
    a[299, 999, 2] = 1.5
    assert a.sum() == 1.5
    b = zeros_mapped((4, 2), PWM_DTYPE)  # small: plain zeros
    assert b.dtype == PWM_DTYPE and not b["compare"].any()


PROBE = r"""
import json, sys
import numpy as np
from design.project import load_project
from harness.closedloop.loop import run
from harness.closedloop.scenario import Event, Scenario
prj = load_project(sys.argv[1])
s = Scenario(duration_s=0.035, vrms_V=115.0, freq_Hz=60.0, phase_deg=170.0, load_kind="resistive",
             load_power_W=800.0, harmonics=((5, 0.02, 0.0),), noise_counts=(1.0, 1.0, 1.0), seed=7)
r = run(prj, [s], progress=False)
print(json.dumps({k: np.asarray(v[:, 0], dtype=float).tolist() for k, v in r.data.items()}))
"""


@pytest.mark.skipif(
    not COMPILED, reason="numba not installed: the kernel already runs as plain Python"
)
def test_compiled_kernel_equals_plain_python(demo_path):
    """The same kernel source, compiled by numba and run by the Python interpreter
    (NUMBA_DISABLE_JIT=1), gives the same records to the bit across the crossing of the line
    (no contraction into fused multiply-adds, no reordering of sums)."""

    def records(env_extra):
        env = {**os.environ, **env_extra}
        out = subprocess.run(
            [sys.executable, "-c", PROBE, str(demo_path)],
            capture_output=True,
            text=True,
            env=env,
            check=True,
            timeout=300,
        )
        return json.loads(out.stdout)

    compiled, plain = records({}), records({"NUMBA_DISABLE_JIT": "1"})
    assert any(
        g != 0 for g in compiled["gates"]
    )  # it got as far as switching (the solver's common step)
    assert compiled.keys() == plain.keys()
    for name in compiled:
        assert compiled[name] == plain[name], name
