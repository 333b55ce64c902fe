"""Shared pytest options: tests marked ``slow`` (long fuzzing) run only when asked."""

from __future__ import annotations

import pytest


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--slow", action="store_true", default=False,
                     help="also run the tests marked slow (thousands of fuzzing examples)")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if config.getoption("--slow") or "slow" in (config.getoption("-m") or ""):
        return
    skip = pytest.mark.skip(reason="long profile: run with --slow (or -m slow)")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
