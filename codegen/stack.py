"""Worst-case stack of a call tree from GCC's call-graph dumps (``-fcallgraph-info=su``: one
``.ci`` file per object, VCG text: a node per function with its frame in bytes, an edge per
call). The generated C has no recursion and no calls through pointers, so the worst case is
the deepest sum of frames along the calls from the root."""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

NODE = re.compile(r'node: \{ title: "([^"]+)" label: "[^"]*?(?:\\n(\d+) bytes \(([^)]*)\))?"')
EDGE = re.compile(r'edge: \{ sourcename: "([^"]+)" targetname: "([^"]+)"')


@dataclass
class StackReport:
    root: str
    bytes: int  # worst case over the call tree from root (frames this code defines)
    path: list[str]  # the calls along the worst case
    unknown: list[str] = field(default_factory=list)  # callees without a frame (library code)
    dynamic: list[str] = field(default_factory=list)  # frames GCC could not bound statically


def read_graph(ci_files: list[Path]) -> tuple[dict[str, int], dict[str, set[str]], list[str]]:
    """(frame bytes per defined function, callees per function, functions of dynamic size)."""
    frames: dict[str, int] = {}
    calls: dict[str, set[str]] = {}
    dynamic: list[str] = []
    for f in ci_files:
        text = f.read_text()
        for name, size, kind in NODE.findall(text):
            if size:
                frames[name] = int(size)
                if kind != "static":
                    dynamic.append(name)
        for a, b in EDGE.findall(text):
            calls.setdefault(a, set()).add(b)
    return frames, calls, dynamic


def worst_case(ci_files: list[Path], root: str) -> StackReport:
    frames, calls, dynamic = read_graph(ci_files)
    if root not in frames:
        raise ValueError(f"{root} is not defined in the call graph")
    unknown: set[str] = set()
    memo: dict[str, tuple[int, list[str]]] = {}

    def deepest(fn: str, active: tuple[str, ...]) -> tuple[int, list[str]]:
        if fn in active:
            raise ValueError(f"recursion through {fn}: the worst-case stack is unbounded")
        if fn in memo:
            return memo[fn]
        if fn not in frames:
            unknown.add(fn)
            return 0, [fn]
        best, path = 0, []
        for callee in sorted(calls.get(fn, ())):
            b, p = deepest(callee, (*active, fn))
            if b > best or not path:
                best, path = b, p
        memo[fn] = (frames[fn] + best, [fn, *path])
        return memo[fn]

    total, path = deepest(root, ())
    return StackReport(root, total, path, sorted(unknown), sorted(set(dynamic) & set(path)))
