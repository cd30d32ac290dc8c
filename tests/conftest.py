"""Shared fixtures; ``--runslow`` enables the closed-loop campaigns marked ``slow``."""
from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"
DEMO = ROOT / "harness" / "data" / "universal_1k5.toml"


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False, help="also run tests marked slow")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


@pytest.fixture(scope="session")
def demo_path() -> Path:
    return DEMO


@pytest.fixture(scope="session")
def demo_project():
    from harness.project import load_project

    return load_project(DEMO)


@pytest.fixture(scope="session")
def demo_built(demo_project):
    from harness.project import build_of

    return build_of(demo_project)
