"""The report's tables as a reader holds them: the compact change table built from the long
key-results table, headers in words with units, run information in stage order, the seed
written plainly, and the print style sheet.

The numbers are checked against the long table they come from and against a direct numpy
computation on the per-slice summary (the median of (A_t - A_ref) over models equals
A_ref / 100 times the median of the change in % of A_ref, since x -> A_ref x / 100 is
increasing: the median commutes with any increasing map; elementary order statistics).
"""

from __future__ import annotations

import re
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from timeslice.report.html import ReportContext, key_numbers, render_report
from timeslice.report.tables import (CHANGE_COLUMNS, change_table, column_header,
                                     in_time_order, scope_years)
from timeslice.series.analysis import change_rows

_TH = re.compile(r"<th(?:\s[^>]*)?>(.*?)</th>")


def _long(summary: pd.DataFrame) -> pd.DataFrame:
    """Key-results rows from the summary (the one function the pipeline uses, change_rows),
    with the horizon's loss and gain rows as key_results adds them (mean over models)."""
    rows = change_rows(summary, reference="baseline")
    last = summary[summary["year"] == summary["year"].max()]
    for scen, g in last.groupby("scenario", sort=False):
        scope = f"{scen} {g['year'].iloc[0]:g}"
        rows.append({"topic": "change", "scope": scope, "quantity": "suitable area lost",
                     "value": float(g["loss_km2"].mean()), "unit": "km2"})
        rows.append({"topic": "change", "scope": scope, "quantity": "suitable area gained",
                     "value": float(g["gain_km2"].mean()), "unit": "km2"})
    return pd.DataFrame(rows)


def _value(k: pd.DataFrame, scope: str, quantity: str) -> float:
    hit = k[(k["scope"] == scope) & (k["quantity"] == quantity)]
    assert len(hit) == 1, (scope, quantity)
    return float(hit["value"].iloc[0])


def test_change_table_numbers_are_the_long_table_rows(summary_df):
    k = _long(summary_df)
    table = change_table(k)
    assert list(table.columns) == list(CHANGE_COLUMNS)
    a0 = _value(k, "baseline", "suitable area")
    scopes = [s for s in dict.fromkeys(k.loc[k["topic"] == "change", "scope"])]
    assert len(table) == len(scopes) == 4  # 21 ka, 2050 low, 2090 low, 2090 high
    for _, row in table.iterrows():
        scope = f"{row['Scenario']} {row['Period']}"
        med = _value(k, scope, "change in suitable area, median over models")
        low = _value(k, scope, "change in suitable area, lowest model")
        high = _value(k, scope, "change in suitable area, highest model")
        assert row["Models"] == _value(k, scope, "models")
        assert row["Net change (% of reference area, median)"] == med
        assert row["Net change (km², median of models)"] == pytest.approx(med * a0 / 100,
                                                                           rel=1e-12)
        assert row["Model range of net change (%)"] == f"{low:+.0f} to {high:+.0f}"
        assert row["Model range of net change (km²)"] == (f"{low * a0 / 100:+,.0f} to "
                                                          f"{high * a0 / 100:+,.0f}")
        lost = k[(k["scope"] == scope) & (k["quantity"] == "suitable area lost")]
        if len(lost):
            assert row["Loss (km², mean of models)"] == float(lost["value"].iloc[0])
            assert row["Gain (km², mean of models)"] == _value(k, scope, "suitable area gained")
        else:
            assert np.isnan(row["Loss (km², mean of models)"])


def test_net_change_in_km2_equals_the_median_of_the_models_areas(summary_df):
    # independent of the key-results code: numpy on the summary's suitable areas
    table = change_table(_long(summary_df))
    a0 = float(summary_df.loc[summary_df.scenario == "baseline", "suitable_area_km2"].iloc[0])
    g = summary_df[(summary_df.scenario == "low-forcing") & (summary_df.year == 2050.0)]
    row = table[(table["Scenario"] == "low-forcing") & (table["Period"] == "2050")].iloc[0]
    diffs = g["suitable_area_km2"].to_numpy() - a0
    assert row["Models"] == 2
    assert row["Net change (km², median of models)"] == pytest.approx(np.median(diffs),
                                                                      rel=1e-9)
    assert row["Model range of net change (km²)"] == f"{diffs.min():+,.0f} to {diffs.max():+,.0f}"


def test_change_table_fills_loss_and_gain_from_the_summary(summary_df):
    k = _long(summary_df)
    table = change_table(k, summary_df)
    g = summary_df[(summary_df.scenario == "low-forcing") & (summary_df.year == 2050.0)]
    row = table[(table["Scenario"] == "low-forcing") & (table["Period"] == "2050")].iloc[0]
    assert row["Loss (km², mean of models)"] == pytest.approx(g["loss_km2"].mean())
    assert row["Gain (km², mean of models)"] == pytest.approx(g["gain_km2"].mean())
    # where the key results carry the rows, both sources agree (the same mean)
    row = table[(table["Scenario"] == "high-forcing")].iloc[0]
    assert row["Loss (km², mean of models)"] == _value(k, "high-forcing 2090",
                                                        "suitable area lost")
    assert change_table(None).empty and change_table(pd.DataFrame()).empty


def test_change_table_rows_in_time_order(summary_df):
    # key results whose scopes are out of time order: the table is oldest first
    k = _long(summary_df)
    order = ["low-forcing 2090", "high-forcing 2090", "low-forcing 2050", "past -19050"]
    shuffled = pd.concat([k[k["topic"] == "reference"]]
                         + [k[k["scope"] == s] for s in order], ignore_index=True)
    table = change_table(shuffled, summary_df)
    assert list(table["Period"]) == ["-19050", "2050", "2090", "2090"]
    assert list(table["Scenario"])[-2:] == ["low-forcing", "high-forcing"]  # kept within a year
    years = scope_years(summary_df)
    assert years["past -19050"] == -19050.0
    assert in_time_order(["b", "a", "x"], {"a": 1.0, "b": 2.0}) == ["a", "b", "x"]


def test_the_report_shows_the_compact_table_and_folds_the_long_one(summary_df):
    k = _long(summary_df)
    ctx = ReportContext(summary=summary_df, tables={"key_results": k},
                        change=change_table(k, summary_df))
    text = render_report(ctx)
    assert text.index('id="change"') < text.index('id="summary-table"')
    section = text[text.index('id="change"'):text.index('id="summary-table"')]
    assert _TH.findall(section) == [_escape(c) for c in CHANGE_COLUMNS]
    assert "<details>" in text and f"Show the {len(k)} rows" in text
    assert text.index("<details>") > text.index('id="table1"')


def _escape(s: str) -> str:
    import html

    return html.escape(s, quote=True)


def test_headers_are_words_with_units(summary_df):
    text = render_report(ReportContext(summary=summary_df))
    heads = _TH.findall(text)
    assert "Suitable area (km²)" in heads and "Centroid shift (km)" in heads
    assert not [h for h in heads if "_" in h], "a snake_case column name is shown as a header"
    assert column_header("elevation_q50_m") == "Elevation, median (m)"
    # names no table lists yet still read as words, the unit from the suffix
    assert column_header("exposed_ice_km2") == "Exposed ice (km²)"
    assert column_header("n_sites") == "Number of sites"
    assert column_header("bearing_deg") == "Bearing (°)"
    assert column_header("change % (p10)") == "Change % (p10)"


@pytest.mark.parametrize("seed", [20240917, np.int64(20240917), 20240917.0])
def test_seed_is_a_plain_integer(summary_df, seed):
    text = render_report(ReportContext(run_info={"seed": seed, "version": "x"}))
    assert "<td>20240917</td>" in text
    assert "20,240,917" not in text and "2.02e+07" not in text and "20240917.0" not in text


def test_run_information_follows_the_stages(series_ds):
    from timeslice.report.assemble import ReportOptions, run_information

    opts = ReportOptions(title="t", history="h", species="s", reference="baseline",
                         seed=20240917, version="0.1", figure_format="svg", dpi=150)
    fit = SimpleNamespace(params={"algorithm": "envelope", "threshold_rule": "p10",
                                  "threshold": 0.25, "n_records_used": 90,
                                  "n_records_input": 120})
    info = run_information(opts, fit=fit, series=series_ds, inputs=pd.DataFrame({"a": [1, 2]}),
                           analysis=SimpleNamespace(window=("21 ka", "1971-2000")),
                           warnings_seen=["second", "first", "second"])
    stages = [k.split(":")[0] for k in info if ":" in k]
    order = ["harmonise", "fit", "transfer", "summarise", "report"]
    assert sorted(stages, key=order.index) == stages  # stage order
    assert list(dict.fromkeys(stages)) == order
    assert info["seed"] == 20240917
    assert info["report: figures"].startswith("SVG at 150 dpi")
    assert info["warnings, in the order raised"] == "(1) second (2) first"  # once, as raised
    assert list(info)[-1] == "warnings, in the order raised"


def test_findings_and_cards_in_time_order(summary_df):
    from timeslice.report.narrative import findings

    k = _long(summary_df)
    late_first = pd.concat([k[k["topic"] == "reference"], k[k["scope"] == "low-forcing 2090"],
                            k[k["scope"] == "past -19050"]], ignore_index=True)
    lines = findings(late_first, years=scope_years(summary_df))
    assert lines[1].startswith("past -19050") and lines[2].startswith("low-forcing 2090")
    cards = key_numbers(summary_df)
    labels = [c[0] for c in cards[1:]]
    assert labels[0].startswith("past, -19050")


def test_print_style_sheet():
    from timeslice.report.html import render_report as render

    text = render(ReportContext())
    css = text[text.index("<style>"):text.index("</style>")]
    block = css[css.index("@media print"):]
    for rule in ("size:A4", "table-layout:fixed", "word-break:break-word", "max-width:100%",
                 "page-break-inside:avoid", "details::details-content"):
        assert rule in block, rule
    assert re.search(r"figure,[^{]*\.key[^{]*\{[^}]*page-break-inside:avoid", block)


def test_wide_tables_get_the_wide_class():
    from timeslice.report.html import WIDE_COLUMNS

    wide = pd.DataFrame({f"c{i}_km2": [1.0] for i in range(WIDE_COLUMNS + 1)})
    narrow = pd.DataFrame({"a_km2": [1.0]})
    text = render_report(ReportContext(tables={"w": wide, "n": narrow}))
    assert text.count('<table class="wide">') == 1
