"""Shared fixtures: reference instances by name; the opt-in `thorough` marker."""

from __future__ import annotations

import os

import pytest

from tests.reference import instance_path
from tracer.base.instance import Instance
from tracer.formats.load import load_instance


@pytest.fixture(scope="session")
def load_reference():
    """Load a TSPLIB reference instance from tests/data by name (cached per session)."""
    cache: dict[str, Instance] = {}

    def load(name: str) -> Instance:
        if name not in cache:
            cache[name] = load_instance(instance_path(name))
        return cache[name]

    return load


#: Tests marked ``@pytest.mark.thorough`` repeat a behaviour the default run already
#: checks (more instances, more cutoffs); they run only when this variable is "1".
THOROUGH_ENV = "PRUNETRAIL_THOROUGH"


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Skip tests marked `thorough` unless PRUNETRAIL_THOROUGH=1 (CI's second step sets it)."""
    if os.environ.get(THOROUGH_ENV) == "1":
        return
    skip = pytest.mark.skip(
        reason=f"thorough: a repeat of a default-run check; set {THOROUGH_ENV}=1 to run it"
    )
    for item in items:
        if "thorough" in item.keywords:
            item.add_marker(skip)
