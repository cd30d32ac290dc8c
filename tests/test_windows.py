"""Window selection: the steady window never spans start-up, an event or its settling, is
one IEC 61000-4-7 window long (10 cycles at 50 Hz, 12 at 60 Hz) and starts and ends at
rising zero crossings of the line; when none fits the report says why."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from design.contract import Mode
from harness.closedloop.scenario import Event, Scenario
from harness.closedloop.windows import event_windows, steady_window

FS = 20000.0
VOUT = 400.0


def synthetic(duration, f, t_run, events, settle_s):
    """Records of a run: a line sine, RUN from t_run, the bus at vout except a 5 % sag from
    each event's start until ``settle_s`` after its end (no ripple)."""
    t = np.arange(int(duration * FS)) / FS
    vs = 325.0 * np.sin(2 * np.pi * f * t)
    mode = np.where(t >= t_run, int(Mode.RUN), int(Mode.SOFT_START))
    vbus = np.full(len(t), VOUT)
    vbus[t < t_run] = 0.9 * VOUT
    for ev in events:
        end = ev.t_s + (ev.get("cycles") / f if ev.kind == "dip" else 0.0)
        vbus[(t >= ev.t_s) & (t < end + settle_s)] = 0.95 * VOUT
    return t, vs, mode, vbus


event_st = st.one_of(
    st.builds(
        lambda t, c: Event(t, "dip", (("residual", 0.0), ("cycles", c))),
        st.floats(0.0, 1.4),
        st.sampled_from([0.5, 1.0, 10.0, 25.0]),
    ),
    st.builds(lambda t: Event(t, "load", (("power", 100.0),)), st.floats(0.0, 1.4)),
)


@settings(max_examples=60, deadline=None)
@given(
    f=st.sampled_from([50.0, 60.0]),
    t_run=st.floats(0.05, 0.6),
    events=st.lists(event_st, max_size=3),
    settle=st.floats(0.0, 0.2),
)
def test_window_never_spans_an_event(f, t_run, events, settle):
    duration = 1.5
    events = sorted(events, key=lambda e: e.t_s)
    scn = Scenario(duration_s=duration, vrms_V=230.0, freq_Hz=f, events=tuple(events))
    t, vs, mode, vbus = synthetic(duration, f, t_run, events, settle)
    w = steady_window(t, vs, mode, vbus, scn, VOUT, FS)
    cycles = 10 if f < 55 else 12
    # the half-cycle mean lags the sag's end by half a cycle, so settling is at least that
    busy = [
        (e.t_s, e.t_s + (e.get("cycles") / f if e.kind == "dip" else 0.0) + settle) for e in events
    ]
    latest_start = (math.floor(duration * f - 1e-9) - cycles) / f  # the last whole window
    if w.steady:
        assert w.start_s >= t_run - 1 / FS
        assert math.isclose(w.end_s - w.start_s, cycles / f, abs_tol=2 / FS)
        for a, b in busy:
            assert b <= w.start_s + 1 / FS or a >= w.end_s, (a, b, w)
        # synchronised: the line is at a rising zero at both ends
        assert abs(np.sin(2 * np.pi * f * w.start_s)) < 1e-3
        assert abs(np.sin(2 * np.pi * f * w.end_s)) < 1e-3
    else:
        assert w.reason
        need = max([t_run] + [b for a, b in busy])
        assert need > latest_start - 1.0 / f, (need, latest_start, w.reason)


def test_events_end_at_the_next_event_or_the_run_end():
    scn = Scenario(
        duration_s=1.0,
        vrms_V=230.0,
        freq_Hz=50.0,
        events=(Event(0.4, "load", (("power", 1.0),)), Event(0.65, "load", (("power", 2.0),))),
    )
    assert event_windows(scn, 1.0) == [(0.4, 0.65), (0.65, 1.0)]


def test_no_window_in_a_short_run_says_so():
    scn = Scenario(duration_s=0.1, vrms_V=230.0, freq_Hz=50.0)
    t, vs, mode, vbus = synthetic(0.1, 50.0, 0.0, [], 0.0)
    w = steady_window(t, vs, mode, vbus, scn, VOUT, FS)
    assert not w.steady and "shorter than one IEC 61000-4-7 window" in w.reason


def test_never_regulating_says_so():
    scn = Scenario(duration_s=0.5, vrms_V=230.0, freq_Hz=50.0)
    t, vs, mode, vbus = synthetic(0.5, 50.0, 10.0, [], 0.0)  # never in RUN
    w = steady_window(t, vs, mode, vbus, scn, VOUT, FS)
    assert not w.steady and "never reached regulation" in w.reason
