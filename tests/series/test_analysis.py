"""analyse_series: every series output in one call."""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest

from timeslice.errors import DataError, TimesliceWarning
from timeslice.series import analyse_series


def _full_stack(stack_factory):
    labels, years, models, scens, pers = ["baseline"], [1990.0], ["observed"], ["baseline"], ["now"]
    for m in ("alder", "birch"):
        for lab, y, s, p in [("21ka", -19050.0, "past", "21 ka"), ("6ka", -4050.0, "past", "6 ka")]:
            labels.append(f"{m}_{lab}"); years.append(y); models.append(m); scens.append(s)
            pers.append(p)
        for s, p in itertools.product(("low", "high"), ("2041-2060", "2081-2100")):
            labels.append(f"{m}_{s}_{p}"); years.append(2050.0 if p[:4] == "2041" else 2090.0)
            models.append(m); scens.append(s); pers.append(p)
    ds = stack_factory(labels=labels, years=years, models=models, scenarios=scens)
    return ds.assign_coords(period=("slice", pers))


def test_analyse_series_everything(stack_factory):
    ds = _full_stack(stack_factory)
    rec = pd.DataFrame({"lon": [-9.5, -8.5, -7.5], "lat": [40.5, 41.5, 42.5],
                        "age_bp": [21000, 20000, 6000]})
    with warnings.catch_warnings():  # records on random not-land cells are skipped with a warning
        warnings.simplefilter("ignore", TimesliceWarning)
        res = analyse_series(ds, window=(-19050, 2000), rate="1 km/yr", records=rec,
                             records_source="dated.csv")
    assert set(res.tables) == {"summary", "detail", "movement", "agreement", "partition",
                               "hindcast"}
    from timeslice.series import DETAIL_COLUMNS, SUMMARY_COLUMNS

    assert list(res.tables["summary"].columns) == SUMMARY_COLUMNS
    assert list(res.tables["detail"].columns)[: len(SUMMARY_COLUMNS + DETAIL_COLUMNS)] == (
        SUMMARY_COLUMNS + DETAIL_COLUMNS)
    assert "limited_loss_km2" in res.tables["detail"]
    assert "refugium_window_analog" in res.series
    assert res.series["dynamic_stability_chain"].sizes["chain"] == 6
    assert set(res.ensemble["source"].values) == {"model", "scenario", "model:scenario"}
    part = res.tables["partition"]
    np.testing.assert_allclose(part.groupby("period")["mean_share"].sum(), 1.0, rtol=1e-5)
    assert set(res.tables["hindcast"]["chain"]) == {"alder past", "birch past"}


def test_analyse_series_notes_without_rate_and_one_model(stack_factory):
    ds = stack_factory()  # one model only
    ds["suitable"][:, 0, 0] = 1  # the record's cell is land and suitable in every slice
    with pytest.warns(TimesliceWarning, match="records skipped") as rec:
        res = analyse_series(ds, records=pd.DataFrame({"lon": [-9.5, -9.5], "lat": [40.5, 40.5],
                                                       "age_bp": [21000, 900000]}))
    assert len(rec) == 1  # said once, not once per chain
    assert res.ensemble is None
    assert any("no rate" in n for n in res.notes)
    assert any("fewer than two climate models" in n for n in res.notes)


def test_analyse_series_single_level_factor_error(stack_factory):
    ds = _full_stack(stack_factory)
    ds = ds.sel(slice=[s for s in ds["slice"].values if "high" not in s])
    with pytest.raises(DataError, match="'scenario' has a single level"):
        analyse_series(ds, factors=("model", "scenario"))


def test_analyse_series_records_without_past(stack_factory):
    ds = stack_factory(labels=("baseline", "low_2090"), years=(1990, 2090),
                       models=("observed", "alder"), scenarios=("baseline", "low"))
    with pytest.raises(DataError, match="dated.csv: the series has no past slices"):
        analyse_series(ds, records=pd.DataFrame({"lon": [0.0], "lat": [0.0], "age_bp": [0]}),
                       records_source="dated.csv")


def test_every_added_layer_is_described(stack_factory):
    # STYLE.md: every output variable carries units, long_name and description; categorical
    # layers carry CF flag_values / flag_meanings of the variable's dtype
    ds = _full_stack(stack_factory)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimesliceWarning)
        res = analyse_series(ds, rate="1 km/yr", window=(-19050, 2000))
    for out in (res.series, res.ensemble):
        for v in out.data_vars:
            if v in ds.data_vars:
                continue
            for key in ("units", "long_name", "description"):
                assert key in out[v].attrs, (v, key)
            if "flag_values" in out[v].attrs:
                fv = np.asarray(out[v].attrs["flag_values"])
                assert len(out[v].attrs["flag_meanings"].split()) == fv.size, v
                if out[v].dtype != bool:
                    assert fv.dtype == out[v].dtype, v


def test_hindcast_skip_warning_said_once(stack_factory):
    ds = _full_stack(stack_factory)  # two paleo chains
    ds["suitable"][:, 0, 0] = 1
    rec = pd.DataFrame({"lon": [-9.5, -9.5], "lat": [40.5, 40.5], "age_bp": [21000, 900000]})
    with pytest.warns(TimesliceWarning, match="1 of 2 records skipped") as caught:
        res = analyse_series(ds, records=rec)
    assert len([w for w in caught if issubclass(w.category, TimesliceWarning)]) == 1
    assert len(res.tables["hindcast"]) == 2 * 2  # per chain: one slice row + the "all" row


def test_analyse_series_rate_error_names_the_setting(stack_factory):
    from timeslice.errors import ConfigError

    with pytest.raises(ConfigError, match=r"`series.dispersal_rate` = '5' has no unit"):
        analyse_series(stack_factory(), rate="5", rate_key="series.dispersal_rate")


def test_key_results(stack_factory):
    from timeslice.series import key_results

    ds = _full_stack(stack_factory)
    ds["suitable"][:, 0, 0] = 1
    rec = pd.DataFrame({"lon": [-9.5, -9.5], "lat": [40.5, 40.5], "age_bp": [21000, 6000]})
    res = analyse_series(ds, window=(-19050, 2000), rate="1 km/yr", records=rec)
    k = key_results(res)
    assert list(k.columns) == ["topic", "scope", "quantity", "value", "unit"]
    assert set(k["topic"]) >= {"refugia", "change", "movement", "novelty", "agreement",
                               "uncertainty", "hindcast"}
    assert set(k.loc[k["topic"] == "refugia", "scope"]) >= {"alder past", "birch past"}
    # the mean loss over models at the horizon matches the detail table
    d = res.tables["detail"]
    low = d[(d["scenario"] == "low") & (d["year"] == 2090.0)]
    got = k[(k["scope"] == "low 2081-2100") & (k["quantity"] == "suitable area lost")]
    assert got["value"].item() == pytest.approx(low["loss_km2"].mean())


def test_unbalanced_ensemble_is_skipped_with_a_note(stack_factory):
    ds = _full_stack(stack_factory)
    ds = ds.sel(slice=[s for s in ds["slice"].values if s != "birch_high_2081-2100"])
    res = analyse_series(ds)
    assert any("partition 2081-2100: skipped (unbalanced design" in n for n in res.notes)
    assert list(res.tables["partition"]["period"].unique()) == ["2041-2060"]
    with pytest.raises(DataError, match="unbalanced design"):
        analyse_series(ds, factors=("model", "scenario"))


def test_key_results_change_per_scenario_and_period(stack_factory):
    # the headline change is 100 (A_t - A_ref) / A_ref per model, median and range over models
    # (recomputed here from the per-slice summary with numpy)
    import numpy as np

    from timeslice.series import key_results

    ds = _full_stack(stack_factory)
    res = analyse_series(ds, reference="baseline")
    k = key_results(res)
    s = res.tables["summary"]
    a0 = float(s.loc[s["slice"] == "baseline", "suitable_area_km2"].iloc[0])
    assert k[(k["topic"] == "reference")]["value"].item() == pytest.approx(a0)
    g = s[(s["scenario"] == "low") & (s["year"] == 2090.0)]
    pct = 100 * (g["suitable_area_km2"].to_numpy() - a0) / a0
    row = k[(k["scope"] == "low 2081-2100")].set_index("quantity")["value"]
    assert row["change in suitable area, median over models"] == pytest.approx(np.median(pct))
    assert row["change in suitable area, lowest model"] == pytest.approx(pct.min())
    assert row["change in suitable area, highest model"] == pytest.approx(pct.max())
    assert row["models"] == len(g)
    assert 0 <= row["share of land in novel climate"] <= 1
