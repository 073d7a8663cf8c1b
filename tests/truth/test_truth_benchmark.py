"""Virtual-species truth benchmark, fast subset: invented worlds whose niche is known.

The full benchmark (six invented species, every slice, 0.1 degree) is ``python bench/truth.py``;
its table is in docs/truth.md. These tests check its scores against reference libraries and the
headline answer of the demo against the demo's own truth.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from sklearn.metrics import jaccard_score, recall_score


def test_overlap_matches_scikit_learn(bench, rng):
    # reference: scikit-learn recall (sensitivity), recall of the negative class (specificity)
    # and jaccard_score, all with sample weights; TSS = sens + spec - 1 (Allouche et al. 2006)
    true = rng.random(500) < 0.4
    est = np.where(rng.random(500) < 0.8, true, ~true)
    w = rng.uniform(0.5, 2.0, 500)
    got = bench.overlap(true, est, w)
    sens = recall_score(true, est, sample_weight=w)
    spec = recall_score(~true, ~est, sample_weight=w)
    assert got["tss"] == pytest.approx(sens + spec - 1.0, abs=1e-12)
    assert got["jaccard"] == pytest.approx(jaccard_score(true, est, sample_weight=w), abs=1e-12)


def test_overlap_of_identical_maps_is_perfect(bench):
    # by definition: TSS 1 and Jaccard 1 for a perfect map (Allouche et al. 2006; Jaccard 1912)
    t = np.array([True, False, True, False])
    got = bench.overlap(t, t, np.ones(4))
    assert got == {"tss": 1.0, "jaccard": 1.0}


@pytest.mark.parametrize(("true", "est", "ok"), [
    (-28.0, -30.0, True), (-28.0, 24.0, False), (30.0, 5.0, True), (2.0, -3.0, True),
    (2.0, -8.0, False), (-2.0, -8.0, True), (0.0, 0.0, True),
])
def test_sign_rule(bench, true, est, ok):
    # our rule (docs/truth.md): a true change within +-5 pp has no meaningful sign
    assert bench.sign_agrees(true, est) == ok


def test_benchmark_niche_is_the_demo_niche(bench, rng):
    # the benchmark's formula for the demo species must be timeslice.demo's own
    from timeslice.demo import presence_probability

    b10 = rng.uniform(-5, 20, 400)
    b12 = rng.uniform(300, 1500, 400)
    ds = xr.Dataset({"bio10": ("x", b10), "bio12": ("x", b12)})
    ref = presence_probability(ds).values
    got = bench.true_probability(bench.WORLDS["demo"], b10, b12)
    np.testing.assert_allclose(got, ref, rtol=1e-12)


def test_records_follow_probability_times_effort(bench, island_21ka, tmp_path):
    # records are drawn from p x effort: none off land, none outside a survey region
    from timeslice.readers import read_occurrences

    sp = bench.WORLDS["small_area"]
    rec = read_occurrences(bench.sample_records(sp, island_21ka.baseline, tmp_path / "r.csv"))
    assert len(rec) == sp.n_records
    assert (rec["lat"] < sp.survey_lat_max + 0.25).all()


def test_harmonised_21ka_climate_keeps_the_true_change(bench, island_21ka):
    # truth.json (written by the generator from the mean of the models' changes on the fine
    # grid) against the same niche on the tool's prepared 21 ka slices: the model mean must keep
    # the true change to within 5 pp (the models' own spread is part of the scenario)
    harm = bench.harmonise_check(island_21ka)
    assert len(harm) == 3
    assert harm["change_pct"].mean() == pytest.approx(harm.attrs["truth_json_change_pct"], abs=5.0)
    assert harm.attrs["truth_json_change_pct"] < -15.0  # the demo's truth: a loss


def test_demo_21ka_change_has_the_sign_of_the_truth(bench, island_21ka):
    # the headline of issue 12: the demo's true niche shrinks at 21 ka (truth.json: -28 %); the
    # tool with the demo settings reported +24 %. It must now report a loss in every model
    # whose true change is a loss, and a gain in none (the size is still too large at this
    # resolution for the model whose true change is near zero: docs/truth.md)
    res = bench.run_world(island_21ka, "demo")
    rows = res["rows"][res["rows"]["scenario"] == "past"]
    assert len(rows) == 3
    tol = bench.SIGN_TOLERANCE_PP
    lossy = rows["true_change_pct"] < -tol
    assert lossy.sum() >= 2 and (rows.loc[lossy, "est_change_pct"] < 0).all(), rows
    assert (rows["est_change_pct"] < tol).all(), rows[["slice", "true_change_pct", "est_change_pct"]]


def test_default_threshold_rule_means_what_the_truth_means(bench, island_21ka):
    # a perfect model (the true probability as suitability) thresholded with the default rule
    # must reproduce the true 21 ka change: then "suitable" is the true niche's contour and any
    # remaining error is the fitted model's. With the 10th-percentile rule it does not (the
    # demo's 21 ka change came out near zero or positive: docs/truth.md)
    from timeslice.config import NicheConfig

    assert island_21ka.cfg.niche.threshold == NicheConfig().threshold == "max_sss"
    res = bench.run_world(island_21ka, "demo")
    rows = res["rows"][res["rows"]["scenario"] == "past"]
    err = (rows["perfect_change_pct"] - rows["true_change_pct"]).abs()
    assert (err < 10.0).all(), rows[["slice", "true_change_pct", "perfect_change_pct"]]


@pytest.fixture(scope="module")
def island_all(bench, tmp_path_factory):
    """Every slice of the invented scenario at 0.25 degree (slow: 19 slices)."""
    return bench.prepare(tmp_path_factory.mktemp("truth25all"), resolution=0.25)


@pytest.mark.slow
def test_perfect_model_meets_the_goals_under_the_default_rule(bench, island_all):
    # every world and slice at 0.25 degree: with the true probability as the suitability, the
    # default threshold rule must meet the benchmark's sign and error goals (nearly: one slice
    # in twenty may miss the sign), and do better than the 10th-percentile rule it replaced
    def scores(threshold):
        rows, refs = [], {}
        for key in bench.WORLDS:
            res = bench.run_world(island_all, key, niche={"threshold": threshold})
            rows.append(res["rows"])
            refs[key] = res["refugium"]
        import pandas as pd

        return bench.goals(pd.concat(rows, ignore_index=True), refs)

    g = scores("max_sss")
    assert g["perfect_sign_agrees"] >= 0.95 * g["n_slices"]
    assert g["perfect_median_abs_error_pp"] < bench.GOAL_MEDIAN_ABS_ERROR_PP
    old = scores("p10")
    assert old["perfect_median_abs_error_pp"] > g["perfect_median_abs_error_pp"]


@pytest.mark.slow
def test_demo_sign_in_most_slices_at_coarse_resolution(bench, island_all):
    # the demo world in all 18 transferred slices: the tool's sign agrees in at least 17 (one
    # 21 ka slice whose true change is +0.7 % comes out as a loss at 0.25 degree)
    res = bench.run_world(island_all, "demo")
    rows = res["rows"][res["rows"]["scenario"] != "baseline"]
    assert rows["sign_agrees"].sum() >= 17, rows[["slice", "true_change_pct", "est_change_pct"]]
