"""Jinja2 templates of the generated C (one .h.j2/.c.j2 pair per control block)."""

from pathlib import Path

TEMPLATE_DIR = Path(__file__).resolve().parent
