"""What the benchmark's choices rest on: target-group records, the refugium construct, defaults."""

from __future__ import annotations

import numpy as np
import pandas as pd


def test_target_group_records_share_the_worlds_effort_and_region(bench, island_21ka, tmp_path):
    # a target-group background (Phillips et al. 2009, Ecol. Appl. 19:181) must carry the focal
    # records' sampling: for the survey-region world every record lies in the region, and every
    # invented related species of timeslice.demo.TARGET_GROUP is there with its count
    from timeslice.demo import TARGET_GROUP
    from timeslice.readers import read_occurrences

    sp = bench.WORLDS["small_area"]
    path = bench.sample_target_group(sp, island_21ka.baseline, tmp_path / "tg.csv")
    rec = read_occurrences(path)
    assert len(rec) == sum(q["n"] for q in TARGET_GROUP.values())
    assert (rec["lat"] < sp.survey_lat_max + 0.25).all()
    names = pd.read_csv(path)["scientificName"].value_counts().to_dict()
    assert names == {k: q["n"] for k, q in TARGET_GROUP.items()}


def test_refugium_is_the_intersection_the_truth_uses(bench):
    # the estimated refugium the benchmark scores (the tool's refugium over today, 21 ka and
    # 6 ka) must be the same construct as the true one: cells suitable in every slice of the
    # window (Carnaval & Moritz 2008), checked against numpy's logical_and on a random stack
    import xarray as xr

    from timeslice.series.stability import refugium

    rng = np.random.default_rng(3)
    maps = rng.random((3, 6, 7)) < 0.6
    labels = ["baseline", "21 ka BP", "6 ka BP"]
    da = xr.DataArray(maps.astype("int8"), dims=("slice", "lat", "lon"),
                      coords={"slice": labels, "lat": np.arange(6.0), "lon": np.arange(7.0)})
    got = np.asarray(refugium(da, window=labels).values, bool)
    np.testing.assert_array_equal(got, np.logical_and.reduce(maps))


def test_defaults_are_the_benchmark_choices():
    # docs/truth.md: envelope, max_sss, a 200 km calibration buffer; fit_niche's keyword
    # defaults are the configuration's, and the demo configuration says the same
    import inspect

    from timeslice.config import NicheConfig
    from timeslice.demo_config import render_demo_config
    from timeslice.niche.workflow import fit_niche

    n = NicheConfig()
    kw = inspect.signature(fit_niche).parameters
    assert (n.algorithm, n.threshold, n.buffer_km) == ("envelope", "max_sss", 200.0)
    assert (kw["algorithm"].default, kw["threshold_rule"].default, kw["buffer_km"].default) == (
        "envelope", "max_sss", 200.0)
    text = render_demo_config(".")
    assert 'threshold = "max_sss"' in text and "buffer_km = 200.0" in text
