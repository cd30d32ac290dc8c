"""Validation is complete: any config the schema accepts key by key either is refused with a
ConfigError that names the file, table and key, or generates C that builds warning-free in
both number formats and whose host build steps (hypothesis over the whole schema, edges
included)."""

from __future__ import annotations

import math
import subprocess
import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from codegen.build import compile_objects
from codegen.render import render
from design.config import ConfigError, from_dict
from design.contract import adc_fields
from design.project import from_config
from design.schema import SCHEMA, Key

from .helpers import DEMO

MAIN = r"""
#include <stdio.h>
#include "{p}_ctrl.h"
int main(void) {{
    static {p}_ctrl_t c;
    {p}_adc_t adc;
    {p}_pwm_t pwm;
    unsigned k;
    {p}_init(&c);
    for (k = 0u; k < 3000u; k++) {{
        {fill}
        {p}_step(&c, &adc, &pwm);
        if (pwm.compare > {P}_PWM_PERIOD_COUNTS || pwm.mode > {P}_MODE_SENSOR_FAULT) return 3;
    }}
    return 0;
}}
"""


def value_of(k: Key) -> st.SearchStrategy:
    """Any value the key accepts alone, its edges included."""
    if k.kind is str:
        return st.sampled_from(k.choices) if k.choices else st.just("pfc")
    lo = k.lo if k.lo is not None else 0.0
    hi = k.hi if k.hi is not None else 1e12
    if k.kind is int:
        return st.integers(int(math.ceil(lo)), int(min(hi, 10**6)))
    edges = [
        x
        for x in (lo, hi)
        if x is not None
        and not (x == lo and k.lo_open)
        and not (x == hi and k.hi_open)
        and x < 1e12
    ]
    wide = st.floats(
        max(lo, 1e-12),
        hi,
        exclude_min=k.lo_open,
        exclude_max=k.hi_open,
        allow_nan=False,
        allow_infinity=False,
    )
    return st.one_of(st.sampled_from(edges), wide) if edges else wide


def configs() -> st.SearchStrategy[dict]:
    base = tomllib.loads(DEMO.read_text())
    changes = st.lists(
        st.sampled_from([(t, n) for t, keys in SCHEMA.items() for n in keys if n != "prefix"]),
        min_size=1,
        max_size=4,
        unique=True,
    ).flatmap(
        lambda picks: st.tuples(
            *(st.tuples(st.just(p), value_of(SCHEMA[p[0]][p[1]])) for p in picks)
        )
    )

    def apply(pairs):
        d = {t: dict(v) for t, v in base.items()}
        for (t, n), v in pairs:
            d.setdefault(t, {})[n] = v
        return d

    return changes.map(apply)


@pytest.mark.slow
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=configs())
def test_refused_clearly_or_builds_and_steps(data, tmp_path_factory):
    try:
        prj = from_config(from_dict(data, "space.toml"))
        builds = {
            fmt: render(from_config(prj.config.replace("control", number_format=fmt)))
            for fmt in ("float32", "q15")
        }
    except ConfigError as exc:
        assert str(exc).startswith("space.toml") and "[" in str(exc), str(exc)
        return
    for fmt, files in builds.items():
        out = tmp_path_factory.mktemp(fmt)
        for n, t in files.items():
            (out / n).write_text(t)
        # every input channel the contract names (bipolar line, or L and N apart) gets a ramp
        fill = " ".join(
            f"adc.{f.name} = (uint16_t)(k * {m}u);"
            for f, m in zip(adc_fields(prj.resolved.line_split), (7, 13, 3, 5), strict=False)
        )
        (out / "main.c").write_text(MAIN.format(p="pfc", P="PFC", fill=fill))
        objs = compile_objects(out, out / "obj")  # strict flags: warnings are errors
        exe = out / "run"
        subprocess.run(["gcc", *map(str, objs), "-o", str(exe)], check=True)
        assert subprocess.run([str(exe)], timeout=60).returncode == 0, fmt
