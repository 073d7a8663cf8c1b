"""Fixtures for the niche stage: a synthetic world with a known niche, as a prepared slice."""

from __future__ import annotations

import pytest
from niche_world import make_world


@pytest.fixture(scope="session")
def world():
    """(baseline, records, truth) of the default synthetic world."""
    return make_world()


@pytest.fixture
def world_factory():
    return make_world
