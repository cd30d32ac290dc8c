"""Scenario files: parsing errors, exact round trip, and every event acting on the run."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from design.config import ConfigError
from harness.closedloop import scenario as sc
from harness.closedloop.loop import run


def test_round_trip_exact(tmp_path):
    s = sc.Scenario(
        duration_s=0.3,
        vrms_V=231.7,
        freq_Hz=49.93,
        phase_deg=12.3,
        load_kind="constant_power",
        load_power_W=1234.5,
        harmonics=((3, 0.031, 10.0), (5, 0.012, -45.0)),
        dc_V=1.5,
        events=(
            sc.Event(0.1, "dip", (("residual", 0.4), ("cycles", 10.0))),
            sc.Event(0.2, "load", (("power", 300.0),)),
        ),
        noise_counts=(1.0, 2.0, 0.5),
        gain_error=(0.01, -0.02, 0.0),
        offset_counts=(3.0, -2.0, 1.0),
        seed=7,
        name="rt",
    )
    p = tmp_path / "s.toml"
    p.write_text(sc.dumps(s))
    assert sc.load(p) == s


@settings(max_examples=40, deadline=None)
@given(
    v=st.floats(0.0, 300.0),
    f=st.floats(40.0, 70.0),
    ph=st.floats(-360.0, 360.0),
    t=st.floats(0.0, 1.0, exclude_max=True),  # an event at the end is refused
    res=st.floats(0.0, 1.0),
    cyc=st.floats(0.0, 300.0),
)
def test_round_trip_any_floats(v, f, ph, t, res, cyc):
    s = sc.Scenario(
        duration_s=1.0,
        vrms_V=v,
        freq_Hz=f,
        phase_deg=ph,
        events=(sc.Event(t, "dip", (("residual", res), ("cycles", cyc))),),
    )
    assert sc.from_dict(__import__("tomllib").loads(sc.dumps(s))) == s


@pytest.mark.parametrize(
    "bad,msg",
    [
        ({"duration": 1, "grid": {"vrsm": 230}}, "did you mean 'vrms'"),
        ({"duration": 1, "load": {"kind": "cp"}}, "resistive, constant_power"),
        ({"duration": 1, "event": [{"t": 0.1, "kind": "sag"}]}, "allowed values are dip"),
        ({"duration": 1, "event": [{"t": 0.1, "kind": "dip", "residual": 0.4}]}, "cycles missing"),
        (
            {"duration": 1, "event": [{"t": 0.1, "kind": "dip", "residual": 1.4, "cycles": 1}]},
            "allowed range is 0..1",
        ),
        ({"grid": {}}, "duration: missing"),
    ],
)
def test_errors(bad, msg):
    with pytest.raises(ConfigError) as ei:
        sc.from_dict(bad, "x.toml")
    assert msg in str(ei.value) and "x.toml" in str(ei.value)


def test_events_act_on_the_run(demo_project):
    f0 = 50.0
    evs = (
        sc.Event(0.100, "dip", (("residual", 0.0), ("cycles", 1.0))),
        sc.Event(0.140, "vrms", (("vrms", 180.0),)),
        sc.Event(0.170, "freq", (("hz", 60.0),)),
        sc.Event(0.2005, "phase_jump", (("deg", 90.0),)),
        sc.Event(0.220, "load", (("power", 300.0),)),
    )
    s = sc.Scenario(
        duration_s=0.26,
        vrms_V=230.0,
        freq_Hz=f0,
        load_kind="resistive",
        load_power_W=1500.0,
        events=evs,
    )
    r = run(demo_project, [s], model="averaged", progress=False)
    t, v = r.data["t_s"][:, 0], r.data["vs_V"][:, 0]
    T = t[1] - t[0]
    dip = (t >= 0.100 + T) & (t < 0.100 + 1 / f0 - T)
    assert np.all(v[dip] == 0.0)
    assert np.max(np.abs(v[(t > 0.125) & (t < 0.14)])) == pytest.approx(
        math.sqrt(2) * 230, rel=1e-3
    )
    assert np.max(np.abs(v[(t > 0.145) & (t < 0.17)])) == pytest.approx(
        math.sqrt(2) * 180, rel=1e-3
    )
    seg = (t > 0.171) & (t < 0.200)
    zc = np.nonzero(np.diff(np.sign(v[seg])) != 0)[0]
    assert np.diff(zc).mean() * T == pytest.approx(1 / 120.0, rel=0.01)  # half period at 60 Hz
    k = int(round(0.2005 / T))
    # a 90 degree jump: the voltage steps by about the peak times (sin(x + 90) - sin x)
    assert abs(v[k] - v[k - 1]) > 50.0
    p_out = r.data["e_out_J"][:, 0] / T
    assert p_out[(t > 0.235)].mean() < 0.4 * p_out[(t > 0.05) & (t < 0.1)].mean()
