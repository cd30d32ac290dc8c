"""Every shipped example config and scenario loads and validates."""

from __future__ import annotations

import pytest

from design.project import load_project
from harness.closedloop import scenario

from .helpers import EXAMPLES


@pytest.mark.parametrize("path", sorted(EXAMPLES.glob("*.toml")), ids=lambda p: p.stem)
def test_example_configs(path):
    load_project(path)


@pytest.mark.parametrize(
    "path", sorted((EXAMPLES / "scenarios").glob("*.toml")), ids=lambda p: p.stem
)
def test_example_scenarios(path):
    s = scenario.load(path)
    assert s.duration_s > 0
