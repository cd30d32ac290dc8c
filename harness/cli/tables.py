"""Plain-text tables for the terminal."""

from __future__ import annotations


def format_table(headers: list[str], rows: list[tuple]) -> str:
    cells = [list(map(str, headers))] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = []
    for n, r in enumerate(cells):
        lines.append("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
        if n == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


PREFIXES = ((1e-9, "n"), (1e-6, "µ"), (1e-3, "m"), (1.0, ""), (1e3, "k"), (1e6, "M"))
ENGINEERING = {"H", "F", "ohm", "s", "Hz", "W"}


def eng(value: float, unit: str) -> tuple[str, str]:
    """(value text, unit text) in engineering units (208.9 µH rather than 0.0002089 H);
    dimensionless values ("1") get no unit."""
    if unit in ("1", ""):
        return f"{value:.4g}", ""
    if unit not in ENGINEERING or value == 0 or value != value:
        return f"{value:.4g}", unit
    scale, prefix = next(((s, p) for s, p in reversed(PREFIXES) if abs(value) >= s), PREFIXES[0])
    shown = "Ω" if unit == "ohm" else unit
    return f"{value / scale:.4g}", f"{prefix}{shown}"
