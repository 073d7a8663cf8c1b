"""Figure files at the chosen resolution and in the chosen format ([output] dpi and
figure_format): PNG pixel size = figure size in inches x dpi (the definition of dots per
inch), SVG that an XML parser reads with its size in points (1 in = 72 pt, the SVG/CSS
absolute units), PDF files that start with the "%PDF" header (ISO 32000-1, 7.5.2) with the PNG
preview the report embeds, and the environmental-space figure following the same settings.
"""

from __future__ import annotations

import base64
import re
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from PIL import Image

from timeslice.report import maps, plots
from timeslice.report.figures import figure_file, preview_file, save
from timeslice.report.html import ReportContext, render_report

_SVG_NS = "{http://www.w3.org/2000/svg}"
_IMG = re.compile(r'<img[^>]*src="data:([^;]+);base64,([^"]*)"')


def _figure(width_in: float, height_in: float):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in))
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1])
    ax.set_title("a $5 label")  # drawn as written, no formula
    return fig


@pytest.mark.parametrize("dpi", [50, 110, 200])
def test_png_pixels_are_inches_times_dpi(tmp_path, dpi):
    path = save(_figure(4.0, 2.5), tmp_path / "f.png", dpi=dpi)
    with Image.open(path) as im:
        assert im.format == "PNG"
        assert im.size == (round(4.0 * dpi), round(2.5 * dpi))
        # the pHYs chunk says the same resolution (Pillow reports it in dots per inch)
        assert im.info["dpi"] == pytest.approx((dpi, dpi), abs=0.5)


def test_report_figures_scale_with_dpi(summary_df, tmp_path):
    # a drawing function of the report: twice the dpi, twice the pixels (same inches)
    sizes = {}
    for dpi in (60, 120):
        with Image.open(plots.gain_loss_bars(summary_df, tmp_path / f"b{dpi}.png",
                                             dpi=dpi)) as im:
            sizes[dpi] = im.size
            inches = np.array(im.size) / np.array(im.info["dpi"])
    assert np.allclose(np.array(sizes[120]), 2 * np.array(sizes[60]), atol=1)
    assert np.allclose(np.array(sizes[120]) / 120, inches, atol=0.02)


def _svg_size_pt(path: Path) -> tuple[float, float]:
    root = ET.parse(path).getroot()  # raises on anything that is not well-formed XML
    assert root.tag == f"{_SVG_NS}svg"
    w, h = root.get("width"), root.get("height")
    assert w.endswith("pt") and h.endswith("pt")
    return float(w[:-2]), float(h[:-2])


def test_svg_is_valid_and_sized_in_points(series_ds, tmp_path):
    path = save(_figure(4.0, 2.5), tmp_path / "f.svg", dpi=80)
    assert _svg_size_pt(path) == pytest.approx((4.0 * 72, 2.5 * 72))
    # a map of the report in SVG: valid XML, and its cell raster embedded as an image
    smap = maps.stability_map(series_ds, tmp_path / "stab.svg", dpi=60)
    assert smap.suffix == ".svg"
    root = ET.parse(smap).getroot()
    assert root.findall(f".//{_SVG_NS}image"), "the cell raster should be an embedded image"


def test_pdf_has_its_header_and_a_preview_the_report_embeds(summary_df, tmp_path):
    pdf = plots.gain_loss_bars(summary_df, tmp_path / "bars.pdf", dpi=70)
    assert pdf.suffix == ".pdf"
    assert pdf.read_bytes().startswith(b"%PDF-")
    assert pdf.read_bytes().rstrip().endswith(b"%%EOF")
    preview = preview_file(pdf)
    assert preview.name == "bars.preview.png" and preview.is_file()
    with Image.open(preview) as im:
        assert im.format == "PNG" and im.info["dpi"] == pytest.approx((70, 70), abs=0.5)
    text = render_report(ReportContext(figures=[("Gain and loss", pdf)]))
    (mime, data), = _IMG.findall(text)
    assert mime == "image/png"
    assert base64.b64decode(data) == preview.read_bytes()
    assert '<a href="' + "/".join(pdf.parts[-2:]) + '">(PDF file)</a>' in text


def test_svg_is_embedded_as_svg(summary_df, tmp_path):
    svg = plots.gain_loss_bars(summary_df, tmp_path / "bars.svg", dpi=70)
    text = render_report(ReportContext(figures=[("Gain and loss", svg)]))
    (mime, data), = _IMG.findall(text)
    assert mime == "image/svg+xml"
    assert base64.b64decode(data) == svg.read_bytes()


def test_figure_jobs_take_the_runs_format_and_dpi(tmp_path):
    from timeslice.report.assemble import FigureJob, ReportOptions, finish_jobs

    opts = ReportOptions(title="t", history="h", species="s", reference="baseline", dpi=222,
                         figure_format="pdf")
    job = FigureJob("caption", plots.gain_loss_bars, (None, tmp_path / "plots" / "x.png"))
    (job,) = finish_jobs([job], opts)
    assert job.args[1] == tmp_path / "plots" / "x.pdf"
    assert job.kwargs["dpi"] == 222
    assert figure_file("a/b.png", "svg") == Path("a/b.svg")


# ----------------------------------------------------------------------------- E-space figure

def _espace_inputs(seed: int = 3):
    """An invented two-predictor niche on a 10 x 12 grid, three slices."""
    rng = np.random.default_rng(seed)
    variables = ["bio1", "bio12"]
    background = pd.DataFrame({"bio1": rng.normal(10, 3, 300), "bio12": rng.normal(800, 150, 300)})
    presence = background.sample(40, random_state=seed).reset_index(drop=True)
    fit = SimpleNamespace(variables=variables, background=background, presence=presence)
    lat, lon = np.arange(10) * 0.5 + 40, np.arange(12) * 0.5 - 30
    slices, suitable = [], []
    for k in range(3):
        ds = xr.Dataset({
            "bio1": (("lat", "lon"), rng.normal(10 + 2 * k, 3, (10, 12))),
            "bio12": (("lat", "lon"), rng.normal(800 - 50 * k, 150, (10, 12))),
            "land": (("lat", "lon"), np.ones((10, 12), bool)),
        }, coords={"lat": lat, "lon": lon})
        slices.append(ds)
        suitable.append((ds["bio1"].values > 10).astype("int8"))
    stack = xr.Dataset({"suitable": (("slice", "lat", "lon"), np.stack(suitable))},
                       coords={"slice": ["baseline", "s1", "s2"], "lat": lat, "lon": lon})
    return fit, slices, stack


@pytest.mark.parametrize("fmt", ["png", "svg", "pdf"])
def test_environment_figure_follows_the_figure_format(tmp_path, fmt):
    from timeslice.report.espace import environment_panels

    fit, slices, stack = _espace_inputs()
    path = environment_panels(fit, slices, stack, tmp_path / "plots" / "environment.png",
                              dpi=90, figure_format=fmt)
    assert path == tmp_path / "plots" / f"environment.{fmt}"
    assert path.is_file()
    if fmt == "png":
        with Image.open(path) as im:
            assert im.info["dpi"] == pytest.approx((90, 90), abs=0.5)
            # 3 slices: one row of 3 panels of 3.0 in, 2.7 in + 0.9 in high (espace layout)
            assert im.size == (round(9.0 * 90), round(3.6 * 90))
    elif fmt == "svg":
        assert _svg_size_pt(path) == pytest.approx((9.0 * 72, 3.6 * 72))
    else:
        assert path.read_bytes().startswith(b"%PDF-")
        assert preview_file(path).is_file()
    assert not (tmp_path / "plots" / "environment.png").exists() or fmt == "png"


def test_environment_figure_keeps_the_suffix_without_a_format(tmp_path):
    from timeslice.report.espace import environment_panels

    fit, slices, stack = _espace_inputs()
    path = environment_panels(fit, slices, stack, tmp_path / "environment.svg", dpi=40)
    assert path.suffix == ".svg"
    ET.parse(path)
