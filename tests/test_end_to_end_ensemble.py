"""The reduced demo with its three invented climate models: ensemble figures, GeoTIFFs of the
agreement layers per scenario x period, refugium patches and the report sections."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import rasterio
from typer.testing import CliRunner

from timeslice.cli import app
from timeslice.demo import generate
from timeslice.demo_config import render_demo_config
from timeslice.grid import cell_area
from timeslice.report import open_series


@pytest.mark.slow
def test_three_model_run_writes_the_ensemble_answers(tmp_path):
    data = tmp_path / "demo_data"
    generate(data, resolution=0.5)
    cfg = data / "demo.toml"
    text = render_demo_config(".")
    assert "geotiff = false" in text
    cfg.write_text(text.replace("geotiff = false", "geotiff = true"))
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    for name in ("panel_agreement.png", "panel_dominant_source.png",
                 "panel_most_dissimilar.png"):
        assert (out / "maps" / name).is_file(), name
    for name in ("importance.png", "threshold_sensitivity.png"):
        assert (out / "plots" / name).is_file(), name
    with open_series(out / "ensemble.nc") as ens:
        groups = list(ens["group"].values)
        n_models = ens["n_models"].values
    assert set(n_models) == {3}
    gt = out / "geotiff" / "ensemble"
    from timeslice.report._output import file_stem

    for g in groups:
        for layer in ("agreement", "consensus"):
            path = gt / f"{layer}_{file_stem(g)}.tif"
            assert path.is_file(), path
            with rasterio.open(path) as r:
                tags = r.tags()
                assert tags["units"] == "1" and tags["long_name"]
                assert f"{tags['scenario']} {tags['period']}" == g
                if layer == "consensus":
                    assert tags["flag_meanings"] == "not_land no_majority majority_suitable"
    assert list(gt.glob("dominant_*.tif")) and list(gt.glob("variance_share_*.tif"))
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Agreement of the climate models" in html and "Most dissimilar variable" in html
    assert "Threshold sensitivity" in html and "Refugium patches" in html
    patches = pd.read_csv(out / "tables" / "refugium_patches.csv")
    with open_series(out / "series.nc") as ds:
        assert "most_dissimilar" in ds and "mod" not in ds
        layer = "refugium_window" if "refugium_window" in ds else "refugium_all_slices"
        area = cell_area(ds).values[ds[layer].values.astype(bool)].sum()
    np.testing.assert_allclose(patches["area_km2"].sum() if len(patches) else 0.0, area,
                               rtol=1e-9)
    man = json.loads((out / "manifest.json").read_text())
    assert any(f.startswith("vector/") for f in man["files"])
