"""fit_niche end to end on a synthetic world, and saving/loading fitted models."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from timeslice.errors import ConfigError, DataError, InputFileError
from timeslice.niche import fit_niche, load_model, save_model
from timeslice.niche import persist


@pytest.fixture(scope="module")
def fitted(world):
    ds, rec, _ = world
    return fit_niche(rec, ds, n_background=1500, buffer_km=150, cv_block_km=100, cv_folds=4, seed=1,
                     algorithm="ellipsoid", threshold_rule="p10")


def test_fit_niche_defaults_are_the_config_defaults():
    # one source of defaults: the Python API and a config-driven run fit the same model. Every
    # [niche] key is a fit_niche argument (same name, or the names mapped below), and so are the
    # [species] taxon keys and the run seed; each default must be equal.
    import inspect

    from timeslice.config import NicheConfig, RunConfig, SpeciesConfig

    sig = inspect.signature(fit_niche).parameters
    renamed = {"threshold": "threshold_rule", "params": "algorithm_params"}
    not_arguments = {"model"}  # a fitted model file: the run skips fit_niche altogether

    def same(api, cfg) -> bool:
        if isinstance(api, (list, tuple)) or isinstance(cfg, (list, tuple)):
            return list(api or []) == list(cfg or [])
        if api is None and cfg == {}:  # no hyperparameters either way
            return True
        return api == cfg

    checked = 0
    for key, field in NicheConfig.model_fields.items():
        if key in not_arguments:
            continue
        api = renamed.get(key, key)
        assert api in sig, f"[niche] {key} has no fit_niche argument"
        assert same(sig[api].default, field.get_default(call_default_factory=True)), key
        checked += 1
    for key in ("taxon", "taxon_field", "fold_subspecies"):
        assert same(sig[key].default, SpeciesConfig.model_fields[key].get_default()), key
    assert sig["seed"].default == RunConfig.model_fields["seed"].get_default()
    assert checked >= 25


def test_fit_niche_reports_progress_per_fold(world):
    ds, rec, _ = world
    calls = []
    fit_niche(rec, ds, algorithm="ellipsoid", n_background=800, cv_folds=4, importance_repeats=0,
              seed=2, progress=lambda stage, done, total: calls.append((stage, done, total)))
    assert calls == [("fit", k, 4) for k in range(5)] + [("fit", 4, 4)]


def test_fit_niche_outputs(fitted, world):
    f = fitted
    assert f.variables and set(f.variables) <= {"bio1", "bio4", "bio5", "bio12", "bio15"}
    assert "bio5" not in f.variables  # |r| ~ 1 with bio1, which comes first
    assert 0 < f.threshold < 1
    assert list(f.presence.columns) == ["lon", "lat", *f.variables]
    assert list(f.background.columns) == ["lon", "lat", *f.variables]
    assert f.calibration_area.dtype == bool
    assert {"reason", "n_dropped"} <= set(f.cleaning.columns)
    assert list(f.evaluation["summary"].tail(2)) == ["mean", "sd"]
    assert f.evaluation.query("summary == 'mean'")["auc"].iloc[0] > 0.7
    assert list(f.response.columns) == ["variable", "value", "suitability", "inside_calibration"]
    assert (~f.response["inside_calibration"]).any()  # the curves extend beyond calibration
    assert list(f.importance.columns) == ["variable", "importance_mean", "importance_sd"]
    assert f.params["threshold_rule"] == "p10" and f.params["seed"] == 1
    # p10 rule (METHODS.md): numpy.quantile(presence scores, 0.1, method="higher"), so
    # ceil(0.1 (n - 1)) training presences fall below it
    s = f.suitability(f.presence)
    assert f.threshold == np.quantile(s, 0.1, method="higher")
    assert np.sum(s < f.threshold) == int(np.ceil(0.1 * (s.size - 1)))


def test_fit_niche_too_few_records_lists_reasons(world):
    ds, rec, _ = world
    few = rec.head(12).copy()
    few.loc[:5, "lat"] = 0.0
    few.loc[:5, "lon"] = 0.0
    with pytest.raises(DataError, match=r"only \d+ of 12 records left.*zero coordinates \(0, 0\): 6"):
        fit_niche(few, ds, n_background=200)


def test_fit_niche_no_record_in_grid(world):
    ds, rec, _ = world
    out = rec.assign(lon=rec["lon"] + 100)
    with pytest.raises(DataError, match="no record lies inside the model grid"):
        fit_niche(out, ds)


def test_fit_niche_bad_names(world):
    ds, rec, _ = world
    with pytest.raises(ConfigError, match="did you mean 'envelope'"):
        fit_niche(rec, ds, algorithm="envelop")
    with pytest.raises(ConfigError, match="did you mean 'max_sss'"):
        fit_niche(rec, ds, threshold_rule="max_ss")
    with pytest.raises(DataError, match="no predictor.*bio7"):
        fit_niche(rec, ds, variables=["bio1", "bio7"])


def test_fit_niche_constant_predictor(world):
    ds, rec, _ = world
    ds2 = ds.assign(bio4=ds["bio4"].where(ds["bio4"].isnull(), 5.0))
    fit = fit_niche(rec, ds2, n_background=300)
    # dropped by the screening, with its reason, instead of flagging every slice as novel
    row = fit.screening.set_index("variable").loc["bio4"]
    assert not row["kept"] and "near-constant" in row["reason"]
    assert "bio4" not in fit.variables


def test_save_load_roundtrip(fitted, tmp_path, world):
    path = save_model(fitted, tmp_path / "niche.joblib")
    again = load_model(path)
    X = fitted.background[fitted.variables]
    np.testing.assert_array_equal(again.suitability(X), fitted.suitability(X))
    assert not list(tmp_path.glob("*.part"))


def test_load_refuses_other_version(fitted, tmp_path, monkeypatch):
    path = save_model(fitted, tmp_path / "m.joblib")
    monkeypatch.setattr(persist, "_version", lambda: "99.0")
    with pytest.raises(InputFileError, match=r"saved by timeslice .* this is timeslice 99\.0; refit"):
        load_model(path)


def test_load_bad_files(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        load_model(tmp_path / "none.joblib")
    junk = tmp_path / "junk.joblib"
    junk.write_bytes(b"not a pickle")
    with pytest.raises(InputFileError, match="not a .*timeslice model file"):
        load_model(junk)


def test_fit_niche_predictor_all_missing(world):
    ds, rec, _ = world
    ds2 = ds.assign(bio15=ds["bio15"] * np.nan)
    with pytest.raises(DataError, match="predictor 'bio15' is missing everywhere in the calibration area"):
        fit_niche(rec, ds2, n_background=300)


def test_fit_niche_buffer_without_land(world):
    ds, rec, _ = world
    # records sit up to 0.45 cells from their cell centre; a 0.5 km buffer reaches no centre
    with pytest.raises(DataError, match="contains no land cell; increase buffer_km"):
        fit_niche(rec, ds, buffer_km=0.5)


def test_fit_niche_background_warns_when_area_is_small(world):
    from timeslice.errors import TimesliceWarning

    ds, rec, _ = world
    with pytest.warns(TimesliceWarning, match="using every cell once") as record:
        fit = fit_niche(rec, ds, n_background=10**6, importance_repeats=0)
    assert record[0].filename == __file__  # points at the caller, not at the library
    assert fit.params["n_background"] == int(fit.calibration_area.sum())


def test_fit_niche_options_hull_thin_mask_target_group(world, tmp_path):
    ds, rec, _ = world
    f1 = fit_niche(rec, ds, calibration="hull_buffer", thin=30.0, n_background=500, importance_repeats=0)
    assert f1.params["calibration"] == "hull_buffer" and f1.params["thin"] == 30.0
    # a mask file on the model grid
    mask = f1.calibration_area.astype("int8").to_dataset(name="mask")
    mask["lat"].attrs.update(standard_name="latitude", units="degrees_north")
    mask["lon"].attrs.update(standard_name="longitude", units="degrees_east")
    mask.to_netcdf(tmp_path / "mask.nc")
    f2 = fit_niche(rec, ds, calibration="mask", calibration_mask=tmp_path / "mask.nc", n_background=500,
                   importance_repeats=0)
    assert bool((f2.calibration_area == f1.calibration_area).all())
    # target-group background from a file of related species' records
    tg = tmp_path / "group.csv"
    rec.assign(lon=rec["lon"] + 0.3).rename(columns={"lon": "decimalLongitude", "lat": "decimalLatitude"})[
        ["decimalLongitude", "decimalLatitude"]
    ].to_csv(tg, index=False)
    f3 = fit_niche(rec, ds, background_file=tg, n_background=500, importance_repeats=0, cv_folds=3)
    assert f3.params["background"] == "target-group file"
    assert len(f3.background) <= 500


def test_calibration_mask_errors(world, tmp_path):
    from timeslice.niche.data import calibration_area_from_mask

    ds, _, _ = world
    with pytest.raises(InputFileError, match="calibration mask file not found"):
        calibration_area_from_mask(tmp_path / "none.nc", ds)
    small = ds["land"].isel(lat=slice(0, 10)).astype("int8")
    with pytest.raises(DataError, match=r"differs from the model grid \(50 x 100\); regrid it"):
        calibration_area_from_mask(small, ds)


def test_tables_and_params_are_plain(fitted):
    import json

    assert set(fitted.tables()) == {"cleaning", "screening", "evaluation", "response", "importance"}
    json.dumps(fitted.params)  # the manifest can store every choice


def test_fit_niche_bad_hyperparameter_is_config_error(world):
    ds, rec, _ = world
    with pytest.raises(ConfigError, match=r"algorithm 'envelope': `percentile` must be in \[0, 50\).*algorithm_params"):
        fit_niche(rec, ds, algorithm="envelope", algorithm_params={"percentile": 70}, n_background=300)
    with pytest.raises(ConfigError, match="`thin` must be 'cell'"):
        fit_niche(rec, ds, thin="sometimes")
    fit = fit_niche(rec, ds, thin="none", n_background=300, importance_repeats=0)
    assert fit.params["thin"] is None


def test_fit_niche_is_reproducible_for_a_seed(world):
    ds, rec, _ = world
    kw = dict(algorithm="forest", algorithm_params={"n_estimators": 15}, n_background=400,
              importance_repeats=2, thin=20.0)
    a, b = fit_niche(rec, ds, seed=5, **kw), fit_niche(rec, ds, seed=5, **kw)
    X = a.background[a.variables]
    np.testing.assert_array_equal(a.suitability(X), b.suitability(X))
    pd.testing.assert_frame_equal(a.evaluation, b.evaluation)
    pd.testing.assert_frame_equal(a.importance, b.importance)
    assert a.threshold == b.threshold
    assert a.params["fitted"]["n_trees"] == 15 and 0.5 < a.params["fitted"]["oob_auc"] <= 1.0
