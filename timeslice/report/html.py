"""One self-contained HTML report: inline CSS, images embedded as base64, no scripts,
no external requests. Every text that comes from inputs is HTML-escaped.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html as _html
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from timeslice.errors import DataError, InputFileError
from timeslice.report._output import output_path

__all__ = ["DEFAULT_CAUTIONS", "ReportContext", "key_numbers", "render_report", "write_report"]

#: The cautions every report carries in full.
DEFAULT_CAUTIONS: tuple[str, ...] = (
    "Projections are hypotheses. Each map says where the climate of a time slice resembles the "
    "climate the species occupies today, as seen through one fitted model; it is not a "
    "forecast of where the species will be found.",
    "Biotic interactions (competitors, pollinators, pathogens, hosts), land use, and limits "
    "to movement and establishment are outside the climate niche. A cell can be climatically "
    "suitable and still unreachable or unoccupied.",
    "Novel-climate areas (MESS < 0, or ExDet NT1 < 0 / NT2 > 1) lie outside the conditions "
    "the model was calibrated on. They are flagged, not trusted: suitability there is an "
    "extrapolation of the fitted response.",
    "For conservation and planning decisions, defer to local expertise, field evidence and "
    "the applicable regulations; use these results as one line of evidence among several.",
)

#: Tables with more columns than this get the class "wide": on paper a fixed layout in a
#: smaller type, so every column fits the page width (the cells wrap) instead of being cut.
WIDE_COLUMNS = 12

_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_JPEG_MAGIC = b"\xff\xd8\xff"

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;
margin:0;color:#1d1d1d;background:#fafafa;line-height:1.45}
header{background:#123049;color:#fff;padding:.9em 2em}
header h1{margin:0 0 .2em 0;font-size:1.6em}header p{margin:.1em 0;opacity:.9}
main{max-width:1100px;margin:0 auto;padding:1em 2em 3em 2em}
h2{border-bottom:2px solid #123049;padding-bottom:.2em;margin-top:1.8em}
h3{margin-bottom:.3em}
.cautions{background:#fff4e0;border-left:6px solid #E69F00;padding:.3em 1em;margin:.6em 0;
font-size:.92em}
.cautions li{margin:.25em 0}
.keys{display:flex;flex-wrap:wrap;gap:.8em;margin:.8em 0}
.key{background:#fff;border:1px solid #ccd;border-radius:6px;padding:.5em .8em;
min-width:11em;flex:1 1 11em}
.key span{display:block;font-size:.8em;color:#444}
.key b{display:block;font-size:1.35em;color:#123049}
.key small{display:block;font-size:.75em;color:#555}
table{border-collapse:collapse;margin:.5em 0 1.2em 0;font-size:.85em;background:#fff}
th,td{border:1px solid #ccd;padding:.25em .55em;text-align:left;vertical-align:top}
td{white-space:nowrap}
th{background:#e8edf2}td.num{text-align:right;font-variant-numeric:tabular-nums}
.scroll{overflow-x:auto}
figure{margin:1em 0 2em 0;background:#fff;border:1px solid #dde;padding:.6em}
figure img{max-width:100%;height:auto;display:block;margin:0 auto}
.pair{display:flex;flex-wrap:wrap;gap:1em;align-items:flex-start}.pair figure{flex:1 1 420px;margin:.5em 0}
figcaption{font-size:.9em;color:#333;margin-top:.4em}
nav{font-size:.85em;margin:.8em 0;color:#555}nav a{color:#0b4f8a}
.methods p{text-align:justify}
footer{font-size:.8em;color:#555;margin-top:3em}
code{font-size:.95em}
.alert{background:#fdecea;border:1px solid #c62828;border-left:8px solid #c62828;
border-radius:6px;padding:.5em 1em;margin:.8em 0;color:#5f1010}
.alert b{color:#8e0000}
p.note{font-size:.85em;color:#333;max-width:60em}
details>summary{cursor:pointer;color:#0b4f8a;margin:.3em 0}
@media print{
@page{size:A4;margin:12mm}
body{background:#fff;font-size:9pt;line-height:1.3}
header{background:none;color:#000;padding:0 0 .3em 0;border-bottom:2px solid #123049}
main{max-width:none;margin:0;padding:0}
nav{display:none}
h2{break-after:avoid;page-break-after:avoid;margin-top:1.2em}
.scroll{overflow:visible}
table{width:100%;max-width:100%;font-size:7pt;break-inside:auto}
th,td{white-space:normal;overflow-wrap:break-word;padding:.1em .25em}
table.wide{table-layout:fixed;font-size:5.5pt}
table.wide th,table.wide td{word-break:break-word;overflow-wrap:anywhere}
thead{display:table-header-group}
tr{break-inside:avoid;page-break-inside:avoid}
img{max-width:100%!important;height:auto}
figure img{max-height:230mm;width:auto}
figure,.key,.alert,.cautions{break-inside:avoid;page-break-inside:avoid}
.pair{display:block}.pair figure{margin:.5em 0}
details>summary{display:none}
details::details-content{content-visibility:visible;display:contents}
a{color:inherit;text-decoration:none}
}
"""


@dataclass
class ReportContext:
    """Everything the HTML report shows.

    Parameters
    ----------
    title : str
        Report title.
    species : str
        Taxon name as given in the inputs (escaped when rendered).
    summary : pandas.DataFrame, optional
        The per-slice summary table (summary.csv columns).
    tables : dict of str to pandas.DataFrame
        Further named tables in display order (e.g. "Record cleaning", "Variable screening",
        "Model evaluation", "Climate inputs").
    figures : list of (caption, path)
        PNG (or JPEG) files embedded in order, each with its caption.
    methods : str
        Methods text; blank lines separate paragraphs.
    cautions : sequence of str
        Shown in full near the top; default :data:`DEFAULT_CAUTIONS`.
    run_info : dict
        Shown as a two-column table (command, output folder, seed, versions, ...).
    highlights : list of str
        Short statements shown under the summary (computed from `summary` when empty).
    key_numbers : list of (label, value) or (label, value, detail)
        Headline cards at the top of the page (computed from `summary` when empty): the
        reference suitable area and, per scenario and period, the median change across models
        with its range and the share of the suitable area in novel climate.
    headline_figures : list of (caption, path)
        Up to two figures shown side by side right after the cautions (e.g. the stability and
        refugia map and the change panel), so the first screen answers the main questions.
    outputs : dict of str to path
        Files of the run (description -> path relative to the report), listed as local links.
    alerts : sequence of str
        Warnings about the trustworthiness of the whole result (e.g. a model that is weak on
        spatial cross-validation), shown as a red card above everything else.
    change : pandas.DataFrame, optional
        The compact change table (:func:`timeslice.report.tables.change_table`: one row per
        scenario and period), shown after the run summary.
    collapsed : sequence of str
        Names of `tables` shown folded (an HTML ``<details>``, opened when printed); by
        default the long key-results table, which `change` condenses.
    """

    title: str = "timeslice report"
    species: str = ""
    summary: pd.DataFrame | None = None
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    figures: list[tuple[str, str | os.PathLike]] = field(default_factory=list)
    methods: str = ""
    cautions: Sequence[str] = DEFAULT_CAUTIONS
    run_info: dict[str, Any] = field(default_factory=dict)
    highlights: list[str] = field(default_factory=list)
    key_numbers: list[tuple[str, ...]] = field(default_factory=list)
    headline_figures: list[tuple[str, str | os.PathLike]] = field(default_factory=list)
    outputs: dict[str, str | os.PathLike] = field(default_factory=dict)
    alerts: Sequence[str] = ()
    change: pd.DataFrame | None = None
    collapsed: Sequence[str] = ("key_results",)


def _e(text: Any) -> str:
    return _html.escape(str(text), quote=True)


def _fmt(value: Any, column: str = "") -> tuple[str, bool]:
    """Cell text and whether it is numeric; years and ages are written without separators."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "", False
    col = str(column).lower()
    if (col == "seed" or col.endswith("_seed")) and _integral(value):
        return f"{int(value)}", True
    if (("year" in col or col.startswith("age")) and isinstance(
            value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)):
        return f"{float(value):.6g}", True
    if isinstance(value, (bool, np.bool_)):
        return ("yes" if value else "no"), False
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}", True
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return str(v), True
        if v != 0 and (abs(v) >= 1e7 or abs(v) < 1e-3):
            return f"{v:.3g}", True
        if abs(v) >= 100:
            return f"{v:,.0f}", True
        return f"{v:.3g}" if abs(v) < 1 else f"{v:.2f}", True
    return str(value), False


def _integral(value: Any) -> bool:
    """Whether `value` is a whole number (an int, or a float without a fraction)."""
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, (int, np.integer)):
        return True
    return isinstance(value, (float, np.floating)) and math.isfinite(value) \
        and float(value).is_integer()


def _run_value(key: str, value: Any) -> Any:
    """A run-information value as shown: a seed as a plain integer ("20240917"), never with
    thousands separators or in exponent form; other numbers as numbers, the rest as text."""
    if "seed" in str(key).lower() and _integral(value):
        return f"{int(value)}"
    return value if isinstance(value, (int, float)) and not isinstance(value, bool) else str(value)


def _table(df: pd.DataFrame, *, max_rows: int = 500) -> str:
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"report tables must be pandas.DataFrame, got {type(df).__name__}")
    from timeslice.report.tables import column_header

    head = "".join(f'<th scope="col">{_e(column_header(c))}</th>' for c in df.columns)
    rows = []
    columns = [str(c) for c in df.columns]
    for rec in df.head(max_rows).itertuples(index=False, name=None):
        cells = []
        for col, v in zip(columns, rec):
            text, num = _fmt(v, col)
            cells.append(f'<td class="num">{_e(text)}</td>' if num else f"<td>{_e(text)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    more = ""
    if len(df) > max_rows:
        more = f"<p>First {max_rows} of {len(df):,} rows shown; the full table is in the CSV.</p>"
    wide = ' class="wide"' if len(columns) > WIDE_COLUMNS else ""
    return (f'<div class="scroll"><table{wide}><thead><tr>{head}</tr></thead><tbody>'
            + "".join(rows) + f"</tbody></table></div>{more}")


def _image(path: str | os.PathLike) -> str:
    """The figure as a ``data:`` URI: PNG, JPEG or SVG as they are; a PDF figure by the PNG
    preview drawn beside it (a page cannot show a PDF inline)."""
    from timeslice.report.figures import preview_file

    p = Path(path)
    if p.suffix.lower() == ".pdf" and preview_file(p).is_file():
        p = preview_file(p)
    if not p.is_file():
        raise InputFileError(f"{p}: report figure not found; make the figure before the report")
    data = p.read_bytes()
    if data.startswith(_PNG_MAGIC):
        mime = "image/png"
    elif data.startswith(_JPEG_MAGIC):
        mime = "image/jpeg"
    elif p.suffix.lower() == ".svg" and b"<svg" in data[:4096]:
        mime = "image/svg+xml"
    else:
        raise InputFileError(f"{p}: report figures must be PNG or JPEG files (or SVG, or PDF with its PNG preview)")
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _figure_link(path: str | os.PathLike) -> str:
    """A link to a vector figure file (SVG, PDF) beside the run's report, '' for raster ones."""
    p = Path(path)
    if p.suffix.lower() not in (".svg", ".pdf"):
        return ""
    rel = "/".join(p.parts[-2:])  # maps/x.pdf, plots/y.svg: relative to the run folder
    return f' <a href="{_e(rel)}">({p.suffix.lstrip(".").upper()} file)</a>'


def _highlights(summary: pd.DataFrame) -> list[str]:
    """Plain statements of area, gain, loss and novelty per non-baseline slice."""
    out: list[str] = []
    need = {"slice", "scenario", "suitable_area_km2", "gain_km2", "loss_km2"}
    if summary is None or not need <= set(summary.columns) or summary.empty:
        return out
    base = summary[summary["scenario"].astype(str) == "baseline"]
    if len(base):
        out.append(f"Baseline suitable area: {float(base['suitable_area_km2'].iloc[0]):,.0f} km².")
    for rec in summary[summary["scenario"].astype(str) != "baseline"].itertuples(index=False):
        r = rec._asdict()
        text = (f"{r['slice']} ({r.get('model', '')}, {r['scenario']}): "
                f"{float(r['suitable_area_km2']):,.0f} km² suitable, "
                f"gains {float(r['gain_km2']):,.0f} km², loses {float(r['loss_km2']):,.0f} km²")
        if "novel_area_km2" in r and pd.notna(r["novel_area_km2"]):
            text += (f"; {float(r['novel_area_km2']):,.0f} km² of the suitable area is in novel "
                     "climate (MESS < 0)")
        out.append(text + ".")
    return out


#: Display names of the tables the pipeline passes under short keys.
TABLE_TITLES = {
    "key_results": "Key results: refugia, loss and gain by movement assumption, agreement, "
                   "uncertainty, hindcast",
    "inputs": "Climate inputs and harmonisation (every file: grid, units, calendar, what was done)",
    "slice_land": "Land, exposed shelf and ice per slice",
    "cleaning": "Occurrence record cleaning",
    "screening": "Predictor screening",
    "evaluation": "Model evaluation (spatial block cross-validation)",
    "importance": "Predictor importance (permutation)",
    "series_detail": "Change per slice, in detail",
    "series_movement": "Movement assumptions per chain",
    "series_agreement": "Agreement across climate models",
    "series_partition": "Sources of uncertainty (variance shares)",
    "series_hindcast": "Hindcast: dated records against past slices",
    "refugium_patches": "Refugium patches, largest first (area, centroid, elevation, analog "
                        "climate, model-scenario chains keeping each)",
    "threshold_summary": "Threshold sensitivity: change in suitable area (median over models) "
                         "under each threshold rule, beside threshold-free changes",
    "environment": "Each slice in environmental space: share of the niche's climates available (environmental availability) and share of land in the calibration climate (analog fraction)",
    "series_biotic": "Biotic limits: suitable area with and without the required partner and the competitor, and the share they remove",
    "series_hypotheses": "Refugium hypotheses side by side: refugium area, dated records inside it (binomial test) and stability against genetic diversity (modified t-test)",
    "series_zones": "Zones (your polygons): suitable area, gain, loss, refugium and novel climate per zone and slice",
    "series_diversity": "Refugium hypothesis against genetic diversity (Dutilleul's modified t-test)",
    "series_diversity_sites": "Sampled populations: diversity, stability and distance to the nearest refugium",
    "response": "Response curves",
    "thresholds": "Thresholds",
    "hindcast": "Hindcast against dated records",
    "ensemble": "Ensemble agreement",
    "partition": "Uncertainty partitioning",
}


#: Title and note of the compact change table.
CHANGE_TITLE = "Change in suitable area per scenario and period, against the reference slice"
CHANGE_NOTE = ("One row per scenario and period, oldest first. Net change: median over the "
               "climate models, with the lowest and highest model; loss and gain: mean over "
               "the models (so gain minus loss need not equal the median net change). Every "
               "number comes from the key-results table (tables/key_results.csv) or the "
               "per-slice summary. Changes where much land is in novel "
               "climate are extrapolations: read them as hypotheses.")


def key_numbers(results: pd.DataFrame | None, *, series=None,
                refugium: str = "refugium") -> list[tuple[str, ...]]:
    """Headline cards for the top of the report, read from the run's key-results table.

    Parameters
    ----------
    results : pandas.DataFrame
        The key results (:func:`timeslice.series.key_results`: ``topic, scope, quantity, value,
        unit``). A per-slice summary (``slice``, ``scenario``, ``suitable_area_km2``, ...) is
        accepted too and turned into those rows by :func:`timeslice.series.change_rows` with the
        baseline as reference, so the numbers have one source either way.
    series : xarray.Dataset, optional
        The summarised series; with a `refugium` layer a card gives the refugium area and the
        latitude-longitude box it spans.
    refugium : str
        Name of the refugium layer whose area the cards give.

    Returns
    -------
    list of (label, value, detail)
        The reference slice's suitable area; refugia (when `series` is given); per scenario and
        period, oldest first, the median over models of the change in suitable area in % of the reference
        area, its range over models, and the shares of land, gain and loss in novel climate.
    """
    from timeslice.series.analysis import change_rows

    from timeslice.report.tables import in_time_order, scope_years

    if results is None or results.empty:
        return []
    years = scope_years(series) or scope_years(results)  # the cards in time order
    if "topic" not in results.columns:
        if not {"slice", "scenario", "suitable_area_km2"} <= set(results.columns):
            return []
        base = results[results["scenario"].astype(str) == "baseline"]
        if not len(base):
            return []
        results = pd.DataFrame(change_rows(results, reference=str(base["slice"].iloc[0])))
        if results.empty:
            return []
    k = results
    out: list[tuple[str, ...]] = []
    ref = k[k["topic"] == "reference"]
    if len(ref):
        out.append((f"Suitable area, reference slice ({ref['scope'].iloc[0]})",
                    f"{float(ref['value'].iloc[0]):,.0f} km²"))
    if series is not None and refugium in getattr(series, "data_vars", {}):
        area = k[(k["topic"] == "refugia") & (k["quantity"] == "refugium area")
                 & (k["scope"].str.startswith("window"))]
        out.append(_refugia_card(series, refugium,
                                 area=float(area["value"].iloc[0]) if len(area) else None))
    from timeslice.series.analysis import change_by_scope

    for scope, g in in_time_order(change_by_scope(k), years):
        n = int(g.get("models", 1))
        scen, _, per = scope.partition(" ")
        value = f"{g['change in suitable area, median over models']:+.0f} %"
        detail = (f"range {g['change in suitable area, lowest model']:+.0f} to "
                  f"{g['change in suitable area, highest model']:+.0f} % over {n} models"
                  if n > 1 else "1 model")
        shares = [(w, g[q]) for w, q in (("of land", "share of land in novel climate"),
                                         ("of the gain", "share of the gain in novel climate"),
                                         ("of the loss", "share of the loss in novel climate"))
                  if q in g and np.isfinite(g[q])]
        if shares:
            detail += "; novel climate: " + ", ".join(f"{100 * v:.0f} % {w}" for w, v in shares)
        out.append((f"{scen}, {per}: change in suitable area", value, detail))
    return out


def _refugia_card(series, layer: str = "refugium", *,
                  area: float | None = None) -> tuple[str, str, str]:
    from timeslice.grid import cell_area

    ref = np.asarray(series[layer].transpose("lat", "lon").values).astype(bool)
    if area is None:  # no key-results row (a series without a window): sum the layer
        area = float((cell_area(series).values * ref).sum())
    window = str(series[layer].attrs.get("slices", "")).split()
    n = len(window) or series.sizes.get("slice", 0)
    label = f"Refugia (suitable in all {n} slices)" if n else "Refugia"
    if not ref.any():
        return (label, "0 km²", "no cell is suitable in every slice")
    return (label, f"{area:,.0f} km²", patch_summary(series, layer))


def patch_summary(series, layer: str = "refugium", *, shown: int = 3) -> str:
    """The refugium's patches named, largest first: "3 patches: R1 2,100 km² at 45.0° N
    24.3° W, 420-709 m; ...", and how many chains outside the window keep each whole."""
    from timeslice.series.patches import refugium_patches

    _, table = refugium_patches(series, layer=layer)
    if table.empty:
        return "no cell is suitable in every slice"
    parts = []
    for r in table.head(shown).itertuples(index=False):
        text = (f"{r.name} {r.area_km2:,.0f} km² at {_deg(r.centroid_lat, 'N', 'S')} "
                f"{_deg(r.centroid_lon, 'E', 'W')}")
        if np.isfinite(r.elevation_min_m):
            text += f", {r.elevation_min_m:,.0f}-{r.elevation_max_m:,.0f} m"
        if r.chains:
            text += f", kept whole by {r.chains_keeping_whole}/{r.chains} chains"
        parts.append(text)
    rest = table.iloc[shown:]
    more = (f"; {len(rest)} smaller, {rest['area_km2'].sum():,.0f} km² together"
            if len(rest) else "")
    n = len(table)
    chains = (". A chain is one climate model under one scenario, beyond the refugium's "
              "slices" if int(table["chains"].iloc[0]) else "")
    return f"{n} patch{'es' if n > 1 else ''}: " + "; ".join(parts) + more + chains


def _deg(value: float, pos: str, neg: str) -> str:
    return f"{abs(value):.1f}° {pos if value >= 0 else neg}"


def _cards_section(cards) -> str:
    """The headline cards: (label, value) or (label, value, detail) each."""
    items = []
    for card in cards:
        if not 2 <= len(card) <= 3:
            raise DataError("ReportContext.key_numbers: each entry must be (label, value) or "
                            f"(label, value, detail), got {card!r}")
        label, main, detail = (*card, "")[:3]
        items.append(f'<div class="key"><span>{_e(label)}</span><b>{_e(main)}</b>'
                     + (f"<small>{_e(detail)}</small>" if detail else "") + "</div>")
    return '<section id="keys"><div class="keys">' + "".join(items) + "</div></section>"


def _outputs_section(outputs) -> str:
    """The list of the run's files, as links relative to the report's folder."""
    items = []
    for what, rel in outputs.items():
        raw = str(rel)
        rel_s = Path(rel).as_posix()
        if Path(rel).is_absolute() or ":" in raw or rel_s.startswith(".."):
            raise DataError(f"ReportContext.outputs[{what!r}]: give a path relative to the "
                            f"report's folder, got {rel_s!r}")
        items.append(f'<li><a href="{_e(rel_s)}">{_e(rel_s)}</a> — {_e(what)}</li>')
    return ('<section id="outputs"><h2>Files of this run</h2><ul>' + "".join(items)
            + "</ul></section>")


def render_report(context: ReportContext) -> str:
    """The report as one HTML string (see :func:`write_report`).

    Parameters
    ----------
    context : ReportContext
        Everything the report shows.
    """
    if not isinstance(context, ReportContext):
        raise DataError(
            f"write_report: `context` must be a ReportContext, got {type(context).__name__}"
        )
    title = _e(context.title)
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    sections: list[tuple[str, str]] = []
    parts = ["<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
             "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
             # A policy forbidding every fetch except embedded data makes the
             # "no request leaves the page" promise enforceable by the browser itself.
             "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
             "img-src data:; style-src 'unsafe-inline'\">"
             f"<title>{title}</title><style>{_CSS}</style></head><body>"]
    sub = f"<p><i>{_e(context.species)}</i></p>" if context.species else ""
    parts.append(f"<header><h1>{title}</h1>{sub}<p>Generated {now}</p></header><main>")

    body: list[str] = []
    if context.alerts:
        body.append('<section id="alerts">' + "".join(
            f'<div class="alert" role="alert"><b>Warning:</b> {_e(a)}</div>'
            for a in context.alerts) + "</section>")
    cards = list(context.key_numbers) or key_numbers(context.summary)
    if cards:
        body.append(_cards_section(cards))
    body.append('<section id="cautions"><h2>Read this first</h2><div class="cautions"><ul>'
                + "".join(f"<li>{_e(c)}</li>" for c in context.cautions)
                + "</ul></div></section>")
    sections.append(("cautions", "Read this first"))
    if context.headline_figures:
        body.append(_headline_section(context.headline_figures))
    highlights = list(context.highlights) or _highlights(context.summary)
    if highlights:
        body.append('<section id="summary"><h2>Run summary</h2><ul>'
                    + "".join(f"<li>{_e(h)}</li>" for h in highlights) + "</ul></section>")
        sections.append(("summary", "Run summary"))
    if context.change is not None and len(context.change):
        body.append(f'<section id="change"><h2>{_e(CHANGE_TITLE)}</h2>'
                    f'<p class="note">{_e(CHANGE_NOTE)}</p>{_table(context.change)}</section>')
        sections.append(("change", "Change per scenario and period"))
    if context.figures:
        body.append(_figures_section(context.figures))
        sections.append(("figures", "Maps and plots"))
    if context.summary is not None:
        # After the figures: readers look at maps before they read a long table.
        body.append('<section id="summary-table"><h2>Summary per slice</h2>'
                    f"{_table(context.summary)}</section>")
        sections.append(("summary-table", "Summary per slice"))
    for k, (name, df) in enumerate(context.tables.items()):
        shown = TABLE_TITLES.get(str(name), str(name))
        inner = _table(df)
        if str(name) in context.collapsed:  # long tables: one click away, open in print
            inner = (f"<details><summary>Show the {len(df):,} rows</summary>{inner}"
                     "</details>")
        body.append(f'<section id="table{k + 1}"><h2>{_e(shown)}</h2>{inner}</section>')
        sections.append((f"table{k + 1}", shown))
    if context.methods:
        paras = [p.strip() for p in str(context.methods).split("\n\n") if p.strip()]
        body.append('<section id="methods" class="methods"><h2>Methods</h2>'
                    + "".join(f"<p>{_e(p)}</p>" for p in paras) + "</section>")
        sections.append(("methods", "Methods"))
    if context.outputs:
        body.append(_outputs_section(context.outputs))
        sections.append(("outputs", "Files of this run"))
    if context.run_info:
        info = pd.DataFrame({"item": [str(k) for k in context.run_info],
                             "value": [_run_value(k, v) for k, v in context.run_info.items()]})
        body.append(f'<section id="run"><h2>Run information</h2>{_table(info)}</section>')
        sections.append(("run", "Run information"))
    parts.append('<nav aria-label="contents">' + " · ".join(
        f'<a href="#{a}">{_e(t)}</a>' for a, t in sections) + "</nav>")
    parts.extend(body)
    parts.append("<footer>Made with timeslice. All maps show climatic suitability only; see "
                 "&ldquo;Read this first&rdquo;.</footer></main></body></html>\n")
    return "".join(parts)


def _headline_section(figures) -> str:
    """Up to two figures side by side right after the cautions."""
    if len(figures) > 2:
        raise DataError("ReportContext.headline_figures: give at most 2 figures, got "
                        f"{len(figures)}; put the others in `figures`")
    return ('<section id="headline"><div class="pair">' + "".join(
        f'<figure><img src="{_image(path)}" alt="{_e(caption)}"><figcaption>{_e(caption)}'
        f"{_figure_link(path)}</figcaption></figure>" for caption, path in figures)
        + "</div></section>")


def _figures_section(figures) -> str:
    """Every other figure, numbered, each with its caption."""
    s = ['<section id="figures"><h2>Maps and plots</h2>']
    for k, (caption, path) in enumerate(figures):
        s.append(f'<figure id="fig{k + 1}"><img src="{_image(path)}" '
                 f'alt="{_e(caption)}"><figcaption>Figure {k + 1}. {_e(caption)}'
                 f"{_figure_link(path)}</figcaption></figure>")
    s.append("</section>")
    return "".join(s)


def write_report(context: ReportContext, path: str | os.PathLike) -> Path:
    """Write the self-contained HTML report.

    Parameters
    ----------
    context : ReportContext
        What to show.
    path : path-like
        Target ``report.html`` (written atomically).

    Returns
    -------
    pathlib.Path
        The written file.

    Notes
    -----
    Images are embedded as ``data:`` URIs, styles are inline, there is no script, and a
    Content-Security-Policy (``default-src 'none'; img-src data:``) stops the browser from
    fetching anything, so the file opens offline and leaks no request.
    """
    text = render_report(context)
    target = Path(path)
    with output_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return target

