"""Helpers shared by the tests (paths, the contract's legal gate patterns, broken
controllers rendered from patched templates)."""

from __future__ import annotations

from pathlib import Path

import jinja2

from c_templates import TEMPLATE_DIR
from design.constants import build_constants
from design.contract import Gate

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"
DEMO = ROOT / "harness" / "data" / "universal_1k5.toml"

GLO, GHI, SLO, SHI = (int(g) for g in Gate)
# Gate patterns a totem-pole controller may command: off; positive half (fast low main, slow
# low on, optionally the fast high as synchronous); negative half (the mirror image).
LEGAL_GATES = {0, GLO | SLO, GLO | SLO | GHI, GHI | SHI, GHI | SHI | GLO}


def consts(prj) -> dict[str, float]:
    """{name: value} of every constant of the generated config header (SI units)."""
    return {k.name: k.value for k in build_constants(prj)}


# Deliberately broken controllers: (template, text of the shipped template, replacement).
BREAKS = {
    # no zero-crossing window: keeps switching in the old polarity until the new one is confirmed
    "no_zc_blank": (
        "polarity.c.j2",
        "    s->blank = (a < {{ P }}_ZC_BLANK_V) || (s->pol == 0) || (s->pol > 0 && vac < "
        "{{ zero }}) ||\n               (s->pol < 0 && vac > {{ zero }});",
        "    (void)a;\n    s->blank = (s->pol == 0); /* TEST BUILD: no zero-crossing window */",
    ),
}


def broken_loader(name: str) -> jinja2.BaseLoader:
    """The shipped templates with one block patched into a broken controller ``name``."""
    template, old, new = BREAKS[name]
    text = (TEMPLATE_DIR / template).read_text()
    if old not in text:
        raise AssertionError(f"{template} no longer has the text the '{name}' mutant replaces")
    return jinja2.ChoiceLoader(
        [
            jinja2.DictLoader({template: text.replace(old, new)}),
            jinja2.FileSystemLoader(str(TEMPLATE_DIR)),
        ]
    )
