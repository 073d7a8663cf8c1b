"""Fixtures of the truth benchmark: the bench module and the invented island at 0.25 degree."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_BENCH = Path(__file__).resolve().parents[2] / "bench" / "truth.py"


@pytest.fixture(scope="session")
def bench():
    """bench/truth.py as a module (the benchmark and these tests share one implementation)."""
    spec = importlib.util.spec_from_file_location("timeslice_truth_bench", _BENCH)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="session")
def island_21ka(bench, tmp_path_factory):
    """The invented demo scenario at 0.25 degree, harmonised: baseline and the three 21 ka slices."""
    return bench.prepare(tmp_path_factory.mktemp("truth25"), resolution=0.25, slices=["21ka"])
