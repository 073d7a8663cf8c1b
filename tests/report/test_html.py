"""The self-contained HTML report."""

from __future__ import annotations

import base64
import html
import io
import re

import pandas as pd
import pytest
from PIL import Image

from timeslice.errors import DataError, InputFileError
from timeslice.report import plots
from timeslice.report.html import DEFAULT_CAUTIONS, ReportContext, render_report, write_report

_IMG = re.compile(r'<img[^>]*src="([^"]*)"')
_URL_ATTR = re.compile(r'(?:src|href|action|poster|data)\s*=\s*["\']?\s*(?:https?:)?//', re.I)


def _context(summary_df, tmp_path, **kw):
    fig = plots.gain_loss_bars(summary_df, tmp_path / "bars.png", dpi=40)
    base = dict(
        title="Demo <run>",
        species="Nivalia demonstrata",
        summary=summary_df,
        tables={"Record cleaning": pd.DataFrame({"reason": ["at sea", "duplicate"],
                                                 "n_dropped": [3, 2]})},
        figures=[("Gain & loss per slice", fig)],
        methods="First paragraph.\n\nSecond paragraph with <b>markup</b>.",
        run_info={"seed": 42, "command": "timeslice demo --out x"},
    )
    base.update(kw)
    return ReportContext(**base)


def test_report_is_self_contained(summary_df, tmp_path):
    path = write_report(_context(summary_df, tmp_path), tmp_path / "report.html")
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    assert "<script" not in text.lower()
    assert not _URL_ATTR.search(text), "a src/href points off the page"
    srcs = _IMG.findall(text)
    assert len(srcs) == 1
    for src in srcs:
        assert src.startswith("data:image/png;base64,")
        data = base64.b64decode(src.split(",", 1)[1], validate=True)
        with Image.open(io.BytesIO(data)) as im:
            im.verify()
    for caution in DEFAULT_CAUTIONS:
        assert html.escape(caution) in text


def test_every_input_text_is_escaped(summary_df, tmp_path):
    evil = '<script>alert("x")</script>'
    summary = summary_df.copy()
    summary.loc[0, "model"] = evil
    ctx = _context(summary_df=summary, tmp_path=tmp_path, species=evil,
                   title=evil, figures=[(evil, tmp_path / "bars.png")],
                   tables={evil: pd.DataFrame({evil: [evil]})}, methods=evil,
                   run_info={evil: evil}, highlights=[evil])
    text = render_report(ctx)
    assert "<script" not in text
    assert "&lt;script&gt;" in text


def test_highlights_from_summary(summary_df, tmp_path):
    text = render_report(_context(summary_df, tmp_path))
    assert "Baseline suitable area" in text
    row = summary_df.iloc[1]
    assert f"gains {row.gain_km2:,.0f} km²" in text


def test_errors(summary_df, tmp_path):
    with pytest.raises(InputFileError, match="missing.png"):
        render_report(_context(summary_df, tmp_path, figures=[("x", tmp_path / "missing.png")]))
    notpng = tmp_path / "fig.png"
    notpng.write_text("<svg/>")
    with pytest.raises(InputFileError, match="PNG or JPEG"):
        render_report(_context(summary_df, tmp_path, figures=[("x", notpng)]))
    with pytest.raises(DataError, match="ReportContext"):
        write_report({"title": "x"}, tmp_path / "r.html")
    with pytest.raises(DataError, match="DataFrame"):
        render_report(_context(summary_df, tmp_path, tables={"t": [1, 2]}))


def test_key_numbers_from_summary(summary_df, tmp_path):
    # change in % of the reference area, median over the models of each scenario and period
    text = render_report(_context(summary_df, tmp_path))
    a0 = summary_df.loc[summary_df.scenario == "baseline", "suitable_area_km2"].iloc[0]
    g = summary_df[(summary_df.scenario == "low-forcing") & (summary_df.year == 2050.0)]
    pct = 100 * (g.suitable_area_km2 - a0) / a0
    assert f"{pct.median():+.0f} %" in text
    assert f"range {pct.min():+.0f} to {pct.max():+.0f} % over 2 models" in text


def test_headline_figures_and_table_titles(summary_df, tmp_path):
    fig = tmp_path / "bars.png"
    ctx = _context(summary_df, tmp_path, tables={"cleaning": pd.DataFrame({"a": [1]})})
    ctx.headline_figures = [("Refugia", fig)]
    text = render_report(ctx)
    assert text.index('id="headline"') < text.index('id="summary"')
    assert "Occurrence record cleaning" in text
    ctx.headline_figures = [("a", fig)] * 3
    with pytest.raises(DataError, match="at most 2"):
        render_report(ctx)
    ctx.headline_figures = []
    ctx.key_numbers = [("only label",)]
    with pytest.raises(DataError, match="key_numbers"):
        render_report(ctx)


def test_refugia_card_area_from_cell_areas(series_ds, summary_df):
    from timeslice.grid import cell_area
    from timeslice.report.html import key_numbers

    cards = key_numbers(summary_df, series=series_ds)
    label, value, detail = cards[1]
    assert label.startswith("Refugia (suitable in all 4 slices)")
    # sum of spherical cell areas (timeslice.grid.cell_area, checked against pyproj there)
    expected = float(cell_area(series_ds).where(series_ds.refugium).sum())
    assert expected > 0
    assert value == f"{expected:,.0f} km²"
    none = series_ds.assign(refugium=series_ds.refugium & False)
    assert key_numbers(summary_df, series=none)[1][1] == "0 km²"


def test_number_formatting():
    from timeslice.report.html import _fmt

    assert _fmt(1995.5, "year") == ("1995.5", True)
    assert _fmt(-19050.0, "year") == ("-19050", True)
    assert _fmt(349662.61, "suitable_area_km2") == ("349,663", True)
    assert _fmt(47.7330, "centroid_lat") == ("47.73", True)
    assert _fmt(0.8934, "auc") == ("0.893", True)
    assert _fmt(float("nan"), "x") == ("", False)
    assert _fmt(True, "x") == ("yes", False)


def test_output_links_are_local(summary_df, tmp_path):
    ctx = _context(summary_df, tmp_path)
    ctx.outputs = {"all layers (CF NetCDF)": "series.nc", "per-slice table": "summary.csv"}
    text = render_report(ctx)
    assert '<a href="series.nc">series.nc</a>' in text
    assert not _URL_ATTR.search(text)
    ctx.outputs = {"x": "https://example.org/a.nc"}
    with pytest.raises(DataError, match="relative"):
        render_report(ctx)
    ctx.outputs = {"x": "/etc/passwd"}
    with pytest.raises(DataError, match="relative"):
        render_report(ctx)


def test_methods_paragraph_states_what_was_done():
    from timeslice.report.narrative import methods_paragraph

    params = {"algorithm": "ellipsoid", "threshold_rule": "p10", "threshold": 0.2,
              "variables": ["bio1", "bio12"], "thin": "cell", "buffer_km": 250.0,
              "calibration": "hull_buffer", "n_background": 5000,
              "background": "target-group file", "n_records_input": 120, "n_records_used": 90}
    text = methods_paragraph(species="Nivalia demonstrata", fit_params=params, n_slices=1,
                             models=["alder"], scenarios=["low"], reference="baseline",
                             clamp=False, window=["21 ka BP", "1981-2010"])
    assert "convex hull of the records widened by a 250.0 km" in text
    assert "target-group file" in text
    assert "1 slice besides the observed baseline, from 1 model: alder; scenario: low" in text
    assert "suitable in the slices '21 ka BP', '1981-2010' of every model" in text
    text = methods_paragraph(species="x", fit_params={**params, "calibration": "mask",
                                                      "background": "random cells by area"},
                             n_slices=4, models=["a", "b"], scenarios=["s1", "s2"],
                             reference="baseline", clamp=True, window=None)
    assert "calibration mask given in the configuration" in text
    assert "4 slices besides the observed baseline, from 2 models" in text
    assert "suitable in every slice of the series" in text


def test_resolution_note_follows_the_cell_size():
    # a 0.1-degree cell is ~11 km at the equator, a 1-degree cell ~111 km (R = 6371 km)
    from timeslice.report.narrative import resolution_note

    assert "fine grain" in resolution_note(5.0)
    assert "intermediate grain" in resolution_note(11.1)
    assert "coarse grain" in resolution_note(111.0)
    assert "Soberón & Nakamura 2009" in resolution_note(111.0)
