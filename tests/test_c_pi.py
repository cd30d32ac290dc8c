"""The generated PI block, through the compiled C, against scipy.signal.dlsim of the same
discrete transfer function C(z) = kp + ki_ts z/(z - 1) = ((kp + ki_ts) z - kp)/(z - 1)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal


def run_pi(b, kp, ki_ts, e, lo=-1e30, hi=1e30, x0=0.0):
    ffi, lib = b.ffi, b.lib
    k = ffi.new("pfc_pi_cfg_t*", {"kp": kp, "ki_ts": ki_ts})
    s = ffi.new("pfc_pi_t*")
    lib.pfc_pi_init(s, x0)
    lo_a = np.broadcast_to(lo, len(e))
    hi_a = np.broadcast_to(hi, len(e))
    return np.array(
        [
            lib.pfc_pi_step(s, k, float(x), float(lo_x), float(hi_x))
            for x, lo_x, hi_x in zip(e, lo_a, hi_a, strict=True)
        ]
    )


def reference(kp, ki_ts, e):
    sys = (np.array([kp + ki_ts, -kp]), np.array([1.0, -1.0]), 1.0)
    _, y = signal.dlsim(sys, e)
    return y.ravel()


@pytest.mark.parametrize("kind", ["step", "ramp"])
@pytest.mark.parametrize("kp,ki_ts", [(0.014042, 9.316e-4), (14.19, 1.5358), (1.0, 0.1)])
def test_pi_matches_dlsim(demo_built, kind, kp, ki_ts):
    n = 400
    e = np.ones(n) if kind == "step" else np.arange(n) * 0.01
    got = run_pi(demo_built, np.float32(kp), np.float32(ki_ts), e)
    ref = reference(float(np.float32(kp)), float(np.float32(ki_ts)), e)
    np.testing.assert_allclose(got, ref, rtol=1e-5, atol=1e-6 * np.max(np.abs(ref)))


@settings(max_examples=40, deadline=None)
@given(
    kp=st.floats(0.01, 10.0),
    ki=st.floats(0.001, 1.0),
    lo=st.floats(-5.0, -0.5),
    hi=st.floats(0.5, 5.0),
    amp=st.floats(0.5, 50.0),
    n_sat=st.integers(20, 300),
)
def test_antiwindup_clamps_and_recovers(demo_built, kp, ki, lo, hi, amp, n_sat):
    # drive hard into the upper clamp, then reverse the error
    e = np.concatenate([np.full(n_sat, amp), np.full(50, -amp)])
    u = run_pi(demo_built, kp, ki, e, lo, hi)
    assert np.all(u <= hi + 1e-6) and np.all(u >= lo - 1e-6)
    # the integrator never wound past the clamp, so the first reversed step already
    # leaves saturation whenever the proportional part alone would (kp amp > 0):
    # u = -kp amp + x with x <= hi, i.e. strictly below hi.
    assert u[n_sat] < hi
    # a PI without anti-windup would have integrated n_sat amp ki_ts above the clamp and
    # stayed saturated for about n_sat steps after the reversal; ours leaves at once
    assert u[n_sat + 1] < hi
