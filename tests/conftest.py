"""Shared fixtures: reference instances by name."""

from __future__ import annotations

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
