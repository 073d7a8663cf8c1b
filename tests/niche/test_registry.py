"""One algorithm registry: a new algorithm registered once is known everywhere."""

from __future__ import annotations

import numpy as np
import pytest

from timeslice.niche import registry
from timeslice.niche.models import EnvelopeNiche, make_model


@pytest.fixture
def throwaway():
    spec = registry.register(registry.Algorithm(
        "box_test", "timeslice.niche.models:EnvelopeNiche",
        "a throwaway box registered by a test"))
    yield spec
    registry.ALGORITHMS.pop("box_test", None)


def test_a_registered_algorithm_is_known_everywhere(throwaway, tmp_path):
    from timeslice.config import load_config
    from timeslice.demo_config import render_demo_config
    from timeslice.report.narrative import methods_paragraph

    assert "box_test" in registry.names()
    assert isinstance(make_model("box_test"), EnvelopeNiche)
    cfg_text = render_demo_config(".").replace('algorithm = "envelope"', 'algorithm = "box_test"')
    assert 'algorithm = "box_test"' in cfg_text
    path = tmp_path / "run.toml"
    path.write_text(cfg_text)
    assert load_config(path).niche.algorithm == "box_test"  # config validation reads the registry
    text = methods_paragraph(species="x", fit_params={"algorithm": "box_test", "threshold": 0.5},
                             n_slices=1, models=["m"], scenarios=["s"], reference="baseline",
                             clamp=False)
    assert "a throwaway box registered by a test" in text


def test_every_algorithm_is_documented_and_builds():
    from pathlib import Path

    doc = (Path(__file__).resolve().parents[2] / "docs" / "config.md").read_text()
    for name in registry.names():
        assert f"`{name}`" in doc, name
        est = make_model(name)
        assert hasattr(est, "fit") and hasattr(est, "predict_proba")
    assert all(registry.methods_text(n) != n for n in registry.names())
