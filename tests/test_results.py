"""The results database: rows committed batch by batch, a killed campaign resumed without
running its finished cases again, and `pfcrig results list | show | compare`."""

from __future__ import annotations

import json
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from harness.campaigns import fuzz
from harness.campaigns import results as db

from .helpers import EXAMPLES
from .test_cli_design import pfcrig

APPLIANCE = EXAMPLES / "appliance_1k2.toml"


class Stop(Exception):
    pass


def _rows(path, cid):
    con = sqlite3.connect(path)
    try:
        return con.execute(
            "SELECT idx, ok, failed, figures FROM cases WHERE campaign_id = ? ORDER BY idx", (cid,)
        ).fetchall()
    finally:
        con.close()


def _recorder(path, prj, resume=False):
    return db.recorder(
        db.connect(path), "fuzz", "x.toml", prj.config.digest(), "fw", {"seed": 7}, 24, resume
    )


@pytest.mark.slow
def test_an_interrupted_campaign_resumes_without_repeating_cases(tmp_path, demo_project):
    """Stopped after its first batch (an exception out of the progress callback, as Ctrl-C
    would), the campaign's first 8 cases are in the database and no more; --resume runs the
    other 16 only, and the rows equal those of an uninterrupted campaign, case for case."""
    path = tmp_path / "r.sqlite"
    seen: list[str] = []

    def stop_after_first(msg: str) -> None:
        seen.append(msg)
        if "batch 1/" in msg:
            raise Stop

    with pytest.raises(Stop):
        fuzz.campaign(
            demo_project,
            24,
            seed=7,
            batch=8,
            log=stop_after_first,
            do_shrink=False,
            recorder=_recorder(path, demo_project),
        )
    assert [r[0] for r in _rows(path, 1)] == list(range(8))
    with pytest.raises(db.ResultsError):  # a different campaign has nothing to resume
        db.recorder(db.connect(path), "fuzz", "x", "other", "fw", {"seed": 7}, 24, True)

    log: list[str] = []
    rec = _recorder(path, demo_project, resume=True)
    assert rec.campaign_id == 1 and rec.resumed
    res = fuzz.campaign(
        demo_project, 24, seed=7, batch=8, log=log.append, do_shrink=False, recorder=rec
    )
    assert "8 already in the results database" in log[0]
    assert sum(m.startswith("  batch") for m in log) == 2  # the 16 left, in two batches of 8
    assert len(res.verdicts) == 24

    fresh = tmp_path / "f.sqlite"
    fuzz.campaign(
        demo_project,
        24,
        seed=7,
        batch=8,
        log=lambda m: None,
        do_shrink=False,
        recorder=_recorder(fresh, demo_project),
    )
    assert _rows(path, 1) == _rows(fresh, 1)
    con = db.connect(path)
    assert db.campaigns(con)[0]["finished_utc"] is not None


@pytest.mark.slow
def test_a_killed_sweep_keeps_its_committed_points_and_resumes(tmp_path):
    """SIGKILL in the middle of `pfcrig sweep` (one point per batch): the points committed
    before it are in the database (WAL), and `--resume` runs only the rest."""
    path = tmp_path / "k.sqlite"
    args = [
        sys.executable,
        "-m",
        "harness.cli",
        "sweep",
        str(APPLIANCE),
        "--vrms",
        "85,140",
        "--load",
        "20,50,100",
        "--batch",
        "1",
        "--workers",
        "1",
        "--db",
        str(path),
    ]
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    done = 0
    while time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.2)
        if path.exists():
            try:
                done = len(_rows(path, 1))
            except sqlite3.OperationalError:  # the tables are not there yet
                done = 0
            if done >= 2:
                break
    assert proc.poll() is None, "the sweep ended before it could be killed"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    kept = len(_rows(path, 1))
    assert 2 <= kept < 6
    r = subprocess.run([*args, "--resume"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert f"{kept} already in the results database" in r.stderr
    assert len(_rows(path, 1)) == 6
    r = pfcrig("results", "--db", str(path), "list")
    assert r.returncode == 0 and "6/6" in r.stdout and "sweep" in r.stdout


def test_results_show_and_compare(tmp_path, demo_project):
    """compare matches cases by scenario and reports a changed verdict and a moved figure
    (rows written by hand: the database's own logic, not a run, is under test here)."""
    path = tmp_path / "c.sqlite"
    con = db.connect(path)
    for k in range(2):
        rec = db.recorder(con, "fuzz", "x.toml", "cfg", f"fw{k}", {"seed": k}, 3, False)
        rows = [
            (0, "a = 1\n", {}, {"pf": 0.99, "mode": "run"}),
            (1, "a = 2\n", {} if k == 0 else {"ov_oc": "bus 460 V"}, {"pf": 0.98}),
            (2, f"a = {3 + k}\n", {}, {"pf": 0.9 if k == 0 else 0.8}),
        ]
        rec.add(rows, 1.5)
        rec.finish()
    out = db.compare(con, 1, 2, 0.05)
    assert (out["matched"], out["only_a"], out["only_b"]) == (2, 1, 1)
    assert [d["idx_a"] for d in out["verdict_changed"]] == [1]
    assert out["figures_moved"] == []  # 0.98 vs 0.98; the moved pf is an unmatched case
    con.execute(
        "UPDATE cases SET figures = ? WHERE campaign_id = 2 AND idx = 0",
        (json.dumps({"pf": 0.90, "mode": "run"}),),
    )
    con.commit()
    moved = db.compare(con, 1, 2, 0.05)["figures_moved"]
    assert [(d["figure"], d["a"], d["b"]) for d in moved] == [("pf", 0.99, 0.90)]
    assert db.compare(con, 1, 2, 0.10)["figures_moved"] == []  # 9 % is inside 10 %

    r = pfcrig("results", "--db", str(path), "show", "2")
    assert r.returncode == 0 and "case 1 (unnamed): ov_oc: bus 460 V" in r.stdout
    r = pfcrig("results", "--db", str(path), "compare", "1", "2")
    assert r.returncode == 0 and "1 changed verdict" in r.stdout
    r = pfcrig("results", "--db", str(path), "show", "9")
    assert r.returncode == 2 and "no campaign 9" in r.stderr
    r = pfcrig("results", "--db", str(tmp_path / "none.sqlite"), "list")
    assert r.returncode == 2 and "no such results database" in r.stderr
    bad = tmp_path / "bad.sqlite"
    bad.write_text("not a database")
    r = pfcrig("results", "--db", str(bad), "list")
    assert r.returncode == 2 and "not a usable results database" in r.stderr


def test_outputs_and_databases_that_are_not_ours_are_refused(tmp_path):
    """A device or pipe at an output path is refused, not replaced; a symlink's target is
    written and the link kept; a SQLite file whose tables are not ours is left untouched;
    ':memory:' is refused (nothing would be kept)."""
    import os
    import sqlite3 as sq

    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    r = pfcrig("results", "--db", str(tmp_path / "x.sqlite"), "list", "--json", str(fifo))
    assert r.returncode == 2
    r = pfcrig("sweep", str(APPLIANCE), "--vrms", "115", "--load", "50", "--json", str(fifo))
    assert r.returncode == 2 and "not a regular file" in r.stderr and fifo.is_fifo()
    other = tmp_path / "other.sqlite"
    con = sq.connect(other)
    con.execute("CREATE TABLE campaigns (id INTEGER PRIMARY KEY, name TEXT)")
    con.commit()
    con.close()
    r = pfcrig("results", "--db", str(other), "list")
    assert r.returncode == 2 and "not a pfcrig results table" in r.stderr
    r = pfcrig("sweep", str(APPLIANCE), "--vrms", "115", "--load", "50", "--db", str(other))
    assert r.returncode == 2 and "not touched" in r.stderr
    tables = sq.connect(other).execute("SELECT name FROM sqlite_master").fetchall()
    assert tables == [("campaigns",)]
    r = pfcrig("sweep", str(APPLIANCE), "--vrms", "115", "--load", "50", "--db", ":memory:")
    assert r.returncode == 2 and "a file name is needed" in r.stderr
    r = pfcrig("sweep", str(APPLIANCE), "--load", "50,50")
    assert r.returncode == 2 and "--load lists 50 twice" in r.stderr


def test_an_output_through_a_symlink_keeps_the_link(tmp_path):
    from codegen.files import atomic_path

    target, link = tmp_path / "t.json", tmp_path / "l.json"
    target.write_text("old")
    link.symlink_to(target)
    with atomic_path(link) as tmp:
        tmp.write_text("new")
    assert link.is_symlink() and target.read_text() == "new"
    assert (target.stat().st_mode & 0o777) == 0o666 & ~_umask()


def _umask() -> int:
    import os

    m = os.umask(0)
    os.umask(m)
    return m
