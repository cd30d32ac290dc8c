"""Checks of the command line's arguments and output paths, done before any work starts,
and atomic writes of every output file (a temporary file in the same folder, renamed into
place: an interrupted write leaves the earlier file intact and no temporary behind)."""

from __future__ import annotations

import argparse
import math
import os
import re
from collections.abc import Callable
from pathlib import Path

from codegen.files import atomic_path

__all__ = [
    "atomic_path",
    "number",
    "output_dir",
    "output_file",
    "run_length",
    "sizes",
    "workers",
    "UsageError",
]

MAX_RUN_S = 60.0  # longest simulated run a command takes (s)
MEMORY_LIMIT_B = 8 << 30  # records of one run in memory at most (bytes)


def _num(x: float, kind: type) -> str:
    """A limit as the user types it: whole numbers in full, reals in short form."""
    return str(int(x)) if kind is int else f"{x:g}"


def number(
    kind: type, lo: float | None = None, hi: float | None = None, lo_open: bool = False
) -> Callable[[str], float]:
    """An argparse type: a finite number of ``kind`` within [lo, hi] (``lo_open``: > lo)."""

    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            what = "a whole number" if kind is int else "a number"
            raise argparse.ArgumentTypeError(f"{text!r} is not {what}") from None
        if isinstance(value, float) and not math.isfinite(value):
            raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
        low_bad = lo is not None and (value <= lo if lo_open else value < lo)
        if low_bad or (hi is not None and value > hi):
            sign = ">" if lo_open else ">="
            rng = " and ".join(
                p
                for p in (
                    (f"{sign} {_num(lo, kind)}" if lo is not None else ""),
                    (f"<= {_num(hi, kind)}" if hi is not None else ""),
                )
                if p
            )
            raise argparse.ArgumentTypeError(f"{text} is out of range: allowed {rng}")
        return value

    parse.__name__ = kind.__name__
    return parse


def numbers(
    kind: type, lo: float | None = None, hi: float | None = None, lo_open: bool = False
) -> Callable[[str], tuple]:
    """An argparse type: a comma-separated list, each entry as ``number`` checks it."""
    one = number(kind, lo, hi, lo_open)

    def parse(text: str) -> tuple:
        parts = text.split(",")
        if not all(p.strip() for p in parts):
            raise argparse.ArgumentTypeError(f"{text!r}: empty entry in the list")
        return tuple(kind(one(p.strip())) for p in parts)

    parse.__name__ = f"list of {kind.__name__}"
    return parse


sizes = numbers(int, 1, 4096)  # batch sizes, each 1..4096


def workers(text: str) -> int:
    """A worker count from 1 to the cores this machine has."""
    cores = os.cpu_count() or 1
    return int(number(int, 1, cores)(text))


def scheduler_address(text: str) -> str:
    """A Dask scheduler's address: tcp://HOST:PORT, the port 1..65535 (TLS would need
    certificates pfcrig has no options for)."""
    m = re.fullmatch(r"(tcp)://([^:/\s]+):(\d{1,5})", text)
    if not m or not 1 <= int(m.group(3)) <= 65535:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a scheduler address: expected tcp://HOST:PORT"
        )
    return text


def add_seed(q: argparse.ArgumentParser) -> None:
    q.add_argument(
        "--seed",
        type=number(int, 0, 2**32 - 1),
        default=0,
        metavar="S",
        help="hypothesis seed: a seed draws the same cases on every run (default 0)",
    )


def add_workers(q: argparse.ArgumentParser, each: str, default: int = 2) -> None:
    q.add_argument(
        "--workers",
        type=workers,
        default=min(default, os.cpu_count() or 1),
        metavar="K",
        help=f"processes, at most this machine's cores, {each} (default {default}; above 1 "
        "an embedded Dask cluster, about 4 s to start here)",
    )


def add_cluster_options(q: argparse.ArgumentParser) -> None:
    """``--cluster local`` (an embedded Dask cluster of ``--workers`` processes) or
    ``--scheduler tcp://HOST:PORT`` (an existing one) for the commands that run batches."""
    g = q.add_mutually_exclusive_group()
    g.add_argument(
        "--cluster",
        choices=["local"],
        default="local",
        help="local (default): with --workers above 1, batches run on an embedded Dask "
        "LocalCluster of that many processes (one batch each at a time)",
    )
    g.add_argument(
        "--scheduler",
        type=scheduler_address,
        metavar="ADDR",
        help="the address of an existing Dask scheduler (tcp://HOST:PORT): batches run on its "
        "workers, which need pfcrig installed; cases are drawn and shrunk here",
    )


class UsageError(Exception):
    """A bad argument found after parsing (exit 2, like argparse's own)."""


def output_file(path: str | None, what: str) -> None:
    """``path`` can be written as a file: not empty, not a folder, its folder exists and is
    writable."""
    if path is None:
        return
    p = Path(path)
    if not path.strip():
        raise UsageError(f"{what}: an empty path")
    if p.is_dir():
        raise UsageError(f"{what} {path}: is a folder, a file is needed")
    if p.exists() and not Path(os.path.realpath(p)).is_file():
        raise UsageError(f"{what} {path}: exists and is not a regular file (a device, a pipe?)")
    if path.startswith(":") or path.startswith("file:"):
        raise UsageError(f"{what} {path}: a file name is needed (no ':memory:' or URI)")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise UsageError(f"{what} {path}: the folder {parent} does not exist")
    if not os.access(parent, os.W_OK):
        raise UsageError(f"{what} {path}: the folder {parent} is not writable")
    if p.exists() and not os.access(p, os.W_OK):
        raise UsageError(f"{what} {path}: exists and is not writable")


def output_dir(path: str | None, what: str) -> None:
    """``path`` can be used as an output folder: not empty, not a file, creatable."""
    if path is None:
        return
    if not path.strip():
        raise UsageError(f"{what}: an empty path")
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise UsageError(f"{what} {path}: is a file, a folder is needed")
    probe = p
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir() or not os.access(probe, os.W_OK):
        raise UsageError(f"{what} {path}: {probe} is not a writable folder")


def run_length(duration_s: float, fsw_Hz: float, lanes: int, bytes_per_period: int) -> None:
    """Refuse a run that is not positive, shorter than one PWM period, longer than
    ``MAX_RUN_S`` or whose records would not fit ``MEMORY_LIMIT_B``."""
    if not math.isfinite(duration_s) or duration_s <= 0.0:
        raise UsageError(f"duration {duration_s!r} s: must be a finite number > 0")
    if duration_s * fsw_Hz < 1.0:
        raise UsageError(
            f"duration {duration_s:g} s: shorter than one PWM period ({1.0 / fsw_Hz:.3g} s)"
        )
    if duration_s > MAX_RUN_S:
        raise UsageError(f"duration {duration_s:g} s: at most {MAX_RUN_S:g} s per run")
    need = int(duration_s * fsw_Hz) * lanes * bytes_per_period
    if need > MEMORY_LIMIT_B:
        raise UsageError(
            f"duration {duration_s:g} s: its records need {need / 2**30:.1f} GiB, "
            f"more than the {MEMORY_LIMIT_B / 2**30:.0f} GiB allowed"
        )
