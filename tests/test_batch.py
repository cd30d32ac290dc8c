"""A batch of scenarios in lockstep gives each scenario exactly the result it gets alone."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from harness.closedloop.loop import run
from harness.closedloop.scenario import Event, Scenario


@pytest.mark.parametrize("model", ["switching", "averaged"])
def test_batch_equals_single_runs_bit_for_bit(demo_project, demo_built, model):
    scns = [
        Scenario(
            duration_s=0.07, vrms_V=230.0, freq_Hz=50.0, load_kind="resistive", load_power_W=1500.0
        ),
        Scenario(
            duration_s=0.07,
            vrms_V=100.0,
            freq_Hz=60.0,
            phase_deg=40.0,
            load_kind="constant_power",
            load_power_W=600.0,
            harmonics=((3, 0.03, 10.0),),
            noise_counts=(1.0, 0.5, 0.3),
            seed=11,
            events=(Event(0.05, "dip", (("residual", 0.0), ("cycles", 0.5))),),
        ),
        Scenario(
            duration_s=0.07,
            vrms_V=264.0,
            freq_Hz=47.0,
            load_kind="resistive",
            load_power_W=300.0,
            gain_error=(0.01, -0.01, 0.005),
            offset_counts=(2.0, -1.0, 0.0),
            noise_counts=(0.8, 0.8, 0.8),
            seed=3,
        ),
    ]
    batch = run(demo_project, scns, model=model, progress=False, built=demo_built)
    assert np.any(batch.data["gates"] != 0)  # the run got as far as switching
    for k, s in enumerate(scns):
        alone = run(demo_project, [s], model=model, progress=False, built=demo_built)
        for name, arr in alone.data.items():
            assert np.array_equal(arr[:, 0], batch.data[name][:, k]), (k, name)


@pytest.mark.parametrize("model", ["switching", "averaged"])
def test_batch_split_over_threads_equals_one_thread_bit_for_bit(
    demo_project, demo_built, model, monkeypatch
):
    """A batch the plant splits into chunks (each chunk's controllers stepped on its thread,
    in the same call) gives each lane what one thread gives it, whether or not a sensor fault
    is active (then the controllers step after the faults, from Python). Three chunks of 40
    lanes: uneven, and split even on a one-core machine."""
    import plant.batch as B
    import plant.kernel as K

    scns = [
        Scenario(
            duration_s=0.07,
            vrms_V=90.0 + 4.5 * k,
            freq_Hz=50.0 if k % 2 else 60.0,
            load_kind="resistive" if k % 3 else "constant_power",
            load_power_W=150.0 + 30.0 * k,
            noise_counts=(0.7, 0.5, 0.3),
            seed=k,
        )
        for k in range(40)
    ]
    glitch = Event(
        0.052,
        "sensor",
        (("value_counts", 3000.0), ("periods", 4.0)),
        (("channel", "il"), ("fault", "glitch")),
    )
    scns[5] = replace(scns[5], events=(glitch,))
    scns[30] = replace(scns[30], events=(Event(0.06, "load", (("power", 900.0),)),))
    monkeypatch.setattr(K, "threads", lambda: 3)
    split = run(demo_project, scns, model=model, progress=False, built=demo_built)
    assert list(B.chunks(40)[0]) == [0, 13, 27, 40]
    assert np.any(split.data["gates"] != 0)
    monkeypatch.setattr(B, "PARALLEL_MIN_LANES", 10**9)
    assert B.chunks(40)[0] is None
    alone = run(demo_project, scns, model=model, progress=False, built=demo_built)
    for name, arr in alone.data.items():
        assert np.array_equal(arr, split.data[name]), name
