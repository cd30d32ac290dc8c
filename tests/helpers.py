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


# Deliberately broken controllers: name -> [(template, text of the shipped template,
# replacement), ...].
_NO_BLANK = (
    "polarity.c.j2",
    "    s->blank = (a < {{ P }}_ZC_BLANK_V) || (s->pol == 0) || (s->pol > 0 && vac < "
    "{{ zero }}) ||\n               (s->pol < 0 && vac > {{ zero }});",
    "    (void)a;\n    s->blank = (s->pol == 0); /* TEST BUILD: no zero-crossing window */",
)
_NO_SLOW_GUARD = (
    "pwm.c.j2",
    "    if (pol != s->last_slow && s->last_slow != 0 &&",
    "    if (false && /* TEST BUILD: no slow-leg off time */",
)
_NO_SYNC_GUARD = (
    "pwm.c.j2",
    '''"fwd > sync_min", "on > 0u"''',
    '''"(fwd == fwd) && (sync_min == sync_min)"''',
)
_NO_ZC_RAMP = (
    "pwm.c.j2",
    "    if (s->ramp >= {{ P }}_ZC_RAMP_PERIODS) {\n        return {{ P }}_DUTY_MAX;\n    }",
    "    if (true) { /* TEST BUILD: no duty ramp after the crossing */\n"
    "        return {{ P }}_DUTY_MAX;\n    }",
)
_NO_MS_FLOOR = (
    "rms.c.j2",
    "            s->inv_ms = 1.0f / ((ms > {{ P }}_MS_FLOOR_V2) ? ms : {{ P }}_MS_FLOOR_V2);",
    "            s->inv_ms = 1.0f / ms; /* TEST BUILD: no floor under the mean square */",
)
BREAKS = {
    # no zero-crossing window: keeps switching in the old polarity until the new one is
    # confirmed (the slow leg's off-time rule still holds it off at each change)
    "no_zc_blank": [_NO_BLANK],
    # no zero-crossing window, no slow-leg off-time rule, synchronous switch whatever the
    # current's direction
    "no_zc_window": [_NO_BLANK, _NO_SLOW_GUARD, _NO_SYNC_GUARD],
    # full duty at once after each crossing (float builds)
    "no_zc_ramp": [_NO_ZC_RAMP],
    # 1/Vrms^2 with no floor under the mean square (float builds)
    "no_ms_floor": [_NO_MS_FLOOR],
}


def broken_loader(name: str) -> jinja2.BaseLoader:
    """The shipped templates with one block patched into a broken controller ``name``."""
    patched: dict[str, str] = {}
    for template, old, new in BREAKS[name]:
        text = patched.get(template) or (TEMPLATE_DIR / template).read_text()
        if old not in text:
            raise AssertionError(f"{template} no longer has the text the '{name}' mutant replaces")
        patched[template] = text.replace(old, new)
    return jinja2.ChoiceLoader(
        [jinja2.DictLoader(patched), jinja2.FileSystemLoader(str(TEMPLATE_DIR))]
    )
