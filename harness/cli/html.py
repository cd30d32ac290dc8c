"""Self-contained HTML reports (``--html FILE`` on run, sweep and fuzz, and ``results show``):
one file with the summary, the verdicts with their reasons, the plots embedded as data URIs,
the config and the scenario, and the cautions; no script, no external file, no network."""

from __future__ import annotations

import base64
import tempfile
from collections.abc import Callable, Sequence
from importlib import resources
from pathlib import Path

import jinja2

from codegen.files import atomic_path

from .caution import CAUTION

PAGE = jinja2.Environment(autoescape=True).from_string(
    resources.files("harness").joinpath("data/report.html.j2").read_text(encoding="utf-8")
)
OK_WORDS = ("ok", "pass", "steady", "held", "n/a")


def png_uri(path: Path) -> str:
    return "data:image/png;base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def with_plots(write: Callable[[Path], Sequence[Path]]) -> list[tuple[str, str]]:
    """Run a plot writer into a temporary folder and return its PNGs as (name, data URI)."""
    with tempfile.TemporaryDirectory(prefix="pfcrig-html-") as d:
        return [(p.name, png_uri(p)) for p in write(Path(d))]


def write_html(
    path: str | Path,
    title: str,
    summary: Sequence[tuple[str, object]],
    verdict_head: Sequence[str],
    verdicts: Sequence[Sequence[object]],
    verdict_col: int,
    images: Sequence[tuple[str, str]] = (),
    texts: Sequence[tuple[str, str]] = (),
) -> None:
    """Write the page to ``path`` (through a temporary file renamed into place).
    ``verdict_col``: the verdict table's column coloured ok (its text one of OK_WORDS) or
    failing."""
    from codegen.render import VERSION

    html = PAGE.render(
        title=title,
        caution=CAUTION,
        summary=[(k, "n/a" if v is None else v) for k, v in summary],
        verdict_head=list(verdict_head),
        verdicts=[[("" if c is None else str(c)) for c in row] for row in verdicts],
        verdict_col=verdict_col,
        ok_words=OK_WORDS,
        images=list(images),
        texts=list(texts),
        version=VERSION,
    )
    with atomic_path(path) as tmp:
        Path(tmp).write_text(html, encoding="utf-8")
    print(f"wrote {path}")
