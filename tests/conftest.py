"""Slow statistical checks are marked `bench`: they run with `pytest --bench` (see README)."""
import pytest


def pytest_addoption(parser):
    parser.addoption("--bench", action="store_true", help="also run the slow statistical checks marked bench")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--bench"):
        return
    skip = pytest.mark.skip(reason="a slow statistical check: run with --bench")
    for item in items:
        if "bench" in item.keywords:
            item.add_marker(skip)
