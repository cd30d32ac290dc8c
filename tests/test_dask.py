"""Campaigns on Dask: the same rows whatever the worker count, and a worker killed in the
middle of a campaign survived (its batch re-run on another) with the same rows."""

from __future__ import annotations

import os
import signal
import sqlite3

import pytest

from harness.campaigns import fuzz
from harness.campaigns import results as db

from .test_cli_design import pfcrig

distributed = pytest.importorskip("distributed", reason="dask.distributed not installed")

N, BATCH, SEED = 24, 8, 13


def _rows(path):
    con = sqlite3.connect(path)
    try:
        return con.execute("SELECT idx, ok, failed, figures FROM cases ORDER BY idx").fetchall()
    finally:
        con.close()


def _campaign(prj, path, **kw):
    rec = db.recorder(db.connect(path), "fuzz", "x", prj.config.digest(), "fw", {}, N, False)
    fuzz.campaign(prj, N, seed=SEED, batch=BATCH, do_shrink=False, recorder=rec, **kw)
    return _rows(path)


@pytest.fixture(scope="module")
def reference(demo_project, tmp_path_factory):
    """The campaign's rows run in this process, one batch after another."""
    path = tmp_path_factory.mktemp("ref") / "r.sqlite"
    return _campaign(demo_project, path, workers=1, log=lambda m: None)


@pytest.mark.slow
def test_one_and_two_workers_give_equal_rows(demo_project, reference, tmp_path):
    rows = _campaign(demo_project, tmp_path / "two.sqlite", workers=2, log=lambda m: None)
    assert len(rows) == N and rows == reference


@pytest.mark.slow
def test_a_worker_killed_mid_campaign_is_survived(demo_project, reference, tmp_path):
    """SIGKILL to one of two workers once the first batch is in: the nanny starts a new one,
    the scheduler re-runs the lost batch, and every row equals the in-process run's."""
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    )
    client = distributed.Client(cluster)
    try:
        pids = sorted(client.run(os.getpid).values())
        killed: list[int] = []

        def kill_after_first(msg: str) -> None:
            if "batch 1/" in msg and not killed:
                os.kill(pids[0], signal.SIGKILL)
                killed.append(pids[0])

        rows = _campaign(
            demo_project,
            tmp_path / "killed.sqlite",
            workers=2,
            scheduler=cluster.scheduler_address,
            log=kill_after_first,
        )
        assert killed, "no batch finished before the end"
        assert pids[0] not in client.run(os.getpid).values()  # that process is gone
        assert len(rows) == N and rows == reference
    finally:
        client.close()
        cluster.close()


def test_a_scheduler_address_is_checked():
    r = pfcrig("fuzz", "x.toml", "--scheduler", "localhost:8786")
    assert r.returncode == 2 and "expected tcp://HOST:PORT" in r.stderr
    r = pfcrig("sweep", "x.toml", "--scheduler", "tcp://h:99999")
    assert r.returncode == 2 and "not a scheduler address" in r.stderr
