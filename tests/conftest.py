"""Shared fixtures; ``--runslow`` enables the closed-loop campaigns marked ``slow``."""

from __future__ import annotations

from pathlib import Path

import pytest

from .helpers import DEMO


def pytest_addoption(parser):
    parser.addoption(
        "--runslow", action="store_true", default=False, help="also run tests marked slow"
    )


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
    from design.project import load_project

    return load_project(DEMO)


@pytest.fixture(scope="session")
def demo_built(demo_project):
    from codegen.build import build_project

    return build_project(demo_project)
