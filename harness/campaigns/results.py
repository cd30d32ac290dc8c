"""The results database: campaigns and sweeps in SQLite (the standard library's ``sqlite3``),
one row per case, committed as each batch of cases finishes (write-ahead log), so a crash,
Ctrl-C or kill loses at most the cases in flight and a resumed campaign runs only the rest.

Tables: ``campaigns`` (one row per campaign: kind, what it ran, its parameters, when, where)
and ``cases`` (campaign, index in the campaign's draw, the scenario as TOML text, ok, the
failed invariants with their reasons, the figures, the wall time of its batch per case, the
host).  Figures are JSON; non-finite floats are stored as null."""

from __future__ import annotations

import json
import math
import socket
import sqlite3
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from codegen.render import VERSION

DEFAULT_DB = "pfcrig-results.sqlite"
SCHEMA = """
CREATE TABLE IF NOT EXISTS campaigns (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    kind TEXT NOT NULL,               -- fuzz | sweep
    key TEXT NOT NULL,                -- what must match for --resume (JSON)
    config_path TEXT NOT NULL,
    config_digest TEXT NOT NULL,
    firmware_digest TEXT NOT NULL,
    pfcrig_version TEXT NOT NULL,
    params TEXT NOT NULL,             -- JSON
    planned INTEGER NOT NULL,         -- cases in the whole draw or grid
    host TEXT NOT NULL,
    started_utc TEXT NOT NULL,
    finished_utc TEXT                 -- null until every case is in
);
CREATE TABLE IF NOT EXISTS cases (
    campaign_id INTEGER NOT NULL REFERENCES campaigns(id),
    idx INTEGER NOT NULL,             -- position in the campaign's draw or grid
    scenario TEXT NOT NULL,           -- TOML, replayable with pfcrig run --scenario
    ok INTEGER NOT NULL,
    failed TEXT NOT NULL,             -- JSON {invariant: reason}
    figures TEXT NOT NULL,            -- JSON
    wall_s REAL NOT NULL,             -- the batch's wall time shared over its cases
    host TEXT NOT NULL,
    PRIMARY KEY (campaign_id, idx)
);
"""


class ResultsError(Exception):
    """A database that cannot be used, or a campaign that is not in it."""


def _json(obj: Any) -> str:
    def clean(x: Any) -> Any:
        if isinstance(x, dict):
            return {str(k): clean(v) for k, v in x.items()}
        if isinstance(x, (list, tuple)):
            return [clean(v) for v in x]
        if hasattr(x, "item"):  # numpy scalars
            x = x.item()
        if isinstance(x, float) and not math.isfinite(x):
            return None
        return x

    return json.dumps(clean(obj), sort_keys=True)


def _utc() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())


COLUMNS = {
    "campaigns": {
        "id",
        "kind",
        "key",
        "config_path",
        "config_digest",
        "firmware_digest",
        "pfcrig_version",
        "params",
        "planned",
        "host",
        "started_utc",
        "finished_utc",
    },
    "cases": {"campaign_id", "idx", "scenario", "ok", "failed", "figures", "wall_s", "host"},
}


def _tables(con: sqlite3.Connection) -> dict[str, set[str]]:
    names = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
    return {n: {r[1] for r in con.execute(f"PRAGMA table_info({n})")} for n in names}


def connect(path: str | Path, create: bool = True) -> sqlite3.Connection:
    """Open the results database at ``path`` in WAL mode, creating its tables in a new or
    empty file when ``create``; a database with other tables of these names, or (not
    ``create``) one without them, is refused and left as it was."""
    try:
        con = sqlite3.connect(str(path), timeout=30.0)
        have = _tables(con)
        for table, cols in COLUMNS.items():
            if table in have and not cols <= have[table]:
                raise ResultsError(
                    f"{path}: its table {table} is not a pfcrig results table (no column "
                    f"{', '.join(sorted(cols - have[table]))}); not touched"
                )
        if not create and not all(t in have for t in COLUMNS):
            raise ResultsError(f"{path}: not a pfcrig results database (no campaigns in it)")
        if create:
            con.execute("PRAGMA journal_mode=WAL")
            con.execute("PRAGMA synchronous=NORMAL")
            con.executescript(SCHEMA)
    except sqlite3.DatabaseError as exc:
        raise ResultsError(f"{path}: not a usable results database ({exc})") from None
    con.row_factory = sqlite3.Row
    return con


@dataclass
class Recorder:
    """Where a campaign writes its cases: ``done()`` the finished ones (index -> (failed,
    figures)), ``add`` a finished batch (committed at once), ``finish`` at the end."""

    con: sqlite3.Connection
    campaign_id: int
    resumed: bool

    def done(self) -> dict[int, tuple[dict, dict]]:
        rows = self.con.execute(
            "SELECT idx, failed, figures FROM cases WHERE campaign_id = ?", (self.campaign_id,)
        )
        return {r["idx"]: (json.loads(r["failed"]), json.loads(r["figures"])) for r in rows}

    def add(self, rows: Iterable[tuple[int, str, dict, dict]], wall_s: float) -> None:
        """``rows``: (index, scenario TOML, failed, figures) of one finished batch."""
        rows = list(rows)
        each = wall_s / max(len(rows), 1)
        host = socket.gethostname()
        with self.con:
            self.con.executemany(
                "INSERT OR REPLACE INTO cases VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                [
                    (
                        self.campaign_id,
                        i,
                        toml,
                        int(not failed),
                        _json(failed),
                        _json(fig),
                        each,
                        host,
                    )
                    for i, toml, failed, fig in rows
                ],
            )

    def discard_if_empty(self) -> None:
        """A new campaign that ended before its first batch (a scheduler that never answered,
        Ctrl-C at once) leaves no row for a later ``--resume`` to pick up."""
        if self.resumed:
            return
        with self.con:
            n = self.con.execute(
                "SELECT COUNT(*) FROM cases WHERE campaign_id = ?", (self.campaign_id,)
            ).fetchone()[0]
            if n == 0:
                self.con.execute("DELETE FROM campaigns WHERE id = ?", (self.campaign_id,))

    def finish(self) -> None:
        with self.con:
            self.con.execute(
                "UPDATE campaigns SET finished_utc = ? WHERE id = ?", (_utc(), self.campaign_id)
            )


def collect(
    results: Iterable[list],
    chunks: list[list[int]],
    by_idx: dict[int, Any],
    recorder: Recorder | None,
    rows_of: Callable[[list[int], list], list[tuple[int, str, dict, dict]]],
    after_batch: Callable[[int], None],
) -> None:
    """Take each batch's results into ``by_idx`` (index in the campaign -> result) as the
    batch finishes, commit its rows (``rows_of(indices, results)``) to ``recorder``, then call
    ``after_batch(k)``; a new campaign that ends before its first batch leaves no row, one
    that ends after its last is marked finished."""
    t_last = time.perf_counter()
    try:
        for k, res in enumerate(results):
            by_idx.update(zip(chunks[k], res, strict=True))
            if recorder is not None:
                recorder.add(rows_of(chunks[k], res), time.perf_counter() - t_last)
            t_last = time.perf_counter()
            after_batch(k)
    except BaseException:
        if recorder is not None:
            recorder.discard_if_empty()
        raise
    if recorder is not None:
        recorder.finish()


def recorder(
    con: sqlite3.Connection,
    kind: str,
    config_path: str,
    config_digest: str,
    firmware_digest: str,
    params: dict,
    planned: int,
    resume: bool,
) -> Recorder:
    """A new campaign's recorder, or with ``resume`` the latest unfinished campaign of the
    same kind, config, firmware and parameters (refused when there is none)."""
    key = _json({"kind": kind, "config": config_digest, "firmware": firmware_digest, **params})
    if resume:
        row = con.execute(
            "SELECT id FROM campaigns WHERE key = ? AND finished_utc IS NULL "
            "ORDER BY id DESC LIMIT 1",
            (key,),
        ).fetchone()
        if row is None:
            raise ResultsError(
                f"--resume: no unfinished {kind} campaign with this config, firmware and "
                "these parameters in the database"
            )
        return Recorder(con, int(row["id"]), True)
    with con:
        cur = con.execute(
            "INSERT INTO campaigns (kind, key, config_path, config_digest, firmware_digest, "
            "pfcrig_version, params, planned, host, started_utc) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                kind,
                key,
                config_path,
                config_digest,
                firmware_digest,
                VERSION,
                _json(params),
                planned,
                socket.gethostname(),
                _utc(),
            ),
        )
    return Recorder(con, int(cur.lastrowid or 0), False)


# -- reading ---------------------------------------------------------------------------------
def campaigns(con: sqlite3.Connection) -> list[dict]:
    """Every campaign with its cases done and failing."""
    rows = con.execute(
        "SELECT c.*, COUNT(k.idx) AS done, COALESCE(SUM(1 - k.ok), 0) AS failing "
        "FROM campaigns c LEFT JOIN cases k ON k.campaign_id = c.id GROUP BY c.id ORDER BY c.id"
    )
    return [dict(r) for r in rows]


def campaign(con: sqlite3.Connection, cid: int) -> dict:
    """One campaign and its cases (index order); refused when it is not in the database."""
    row = con.execute("SELECT * FROM campaigns WHERE id = ?", (cid,)).fetchone()
    if row is None:
        raise ResultsError(f"no campaign {cid} in the database (`pfcrig results list`)")
    out = dict(row)
    out["params"] = json.loads(out["params"])
    out["cases"] = [
        {**dict(r), "failed": json.loads(r["failed"]), "figures": json.loads(r["figures"])}
        for r in con.execute(
            "SELECT idx, scenario, ok, failed, figures, wall_s, host FROM cases "
            "WHERE campaign_id = ? ORDER BY idx",
            (cid,),
        )
    ]
    return out


def _moved(a: Any, b: Any, rel_tol: float) -> bool:
    if isinstance(a, bool) or isinstance(b, bool) or not isinstance(a, (int, float)):
        return False
    if not isinstance(b, (int, float)):
        return False
    return abs(a - b) > rel_tol * max(abs(a), abs(b), 1e-12)


def compare(con: sqlite3.Connection, a: int, b: int, rel_tol: float = 0.05) -> dict:
    """Two campaigns case by case, matched by their scenario text (the same draw of two
    firmware revisions matches case for case): verdicts that changed, figures that moved by
    more than ``rel_tol`` of the larger, cases only in one of them."""
    ca, cb = campaign(con, a), campaign(con, b)
    by_a = {c["scenario"]: c for c in ca["cases"]}
    by_b = {c["scenario"]: c for c in cb["cases"]}
    changed, moved = [], []
    for scn, x in by_a.items():
        y = by_b.get(scn)
        if y is None:
            continue
        if x["ok"] != y["ok"] or set(x["failed"]) != set(y["failed"]):
            changed.append(
                {
                    "idx_a": x["idx"],
                    "idx_b": y["idx"],
                    "failed_a": x["failed"],
                    "failed_b": y["failed"],
                }
            )
        for k in sorted(set(x["figures"]) & set(y["figures"])):
            fa, fb = x["figures"][k], y["figures"][k]
            if _moved(fa, fb, rel_tol):
                moved.append({"idx_a": x["idx"], "idx_b": y["idx"], "figure": k, "a": fa, "b": fb})
    return {
        "a": {k: ca[k] for k in ("id", "kind", "config_digest", "firmware_digest")},
        "b": {k: cb[k] for k in ("id", "kind", "config_digest", "firmware_digest")},
        "matched": len(set(by_a) & set(by_b)),
        "only_a": len(set(by_a) - set(by_b)),
        "only_b": len(set(by_b) - set(by_a)),
        "rel_tol": rel_tol,
        "verdict_changed": changed,
        "figures_moved": moved,
    }
