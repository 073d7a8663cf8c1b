"""The file-to-file row-block transfer gives the values and attributes of project_slice."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.transfer import project_slice
from timeslice.transfer.files import project_file

VARS = ["bio1", "bio5", "bio12"]


def _same(a: xr.Dataset, b: xr.Dataset) -> None:
    assert list(a.data_vars) == list(b.data_vars)
    for v in b.variables:
        assert a[v].dtype == b[v].dtype, v
        assert np.array_equal(a[v].values, b[v].values, equal_nan=a[v].dtype.kind == "f"), v
        assert set(a[v].attrs) == set(b[v].attrs), v
    assert set(a.attrs) == set(b.attrs)


@pytest.mark.parametrize("clamp", [False, True])
def test_project_file_equals_project_slice(fitted_logistic, reference_df, slice_factory,
                                           tmp_path, clamp):
    ds = slice_factory(ny=37, nx=23, scale=2.0)
    ds["land"] = ds["land"].astype("int8")  # files hold the land mask as 0/1
    src = tmp_path / "slice.nc"
    ds.to_netcdf(src)
    # tiny blocks: many row blocks on two threads, written out of order
    project_file(fitted_logistic, src, tmp_path / "rows.nc", variables=VARS,
                 reference=reference_df, threshold=0.5, clamp=clamp, budget_mb=0.001, threads=2)
    ds["land"] = ds["land"].astype(bool)
    project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df, threshold=0.5,
                  clamp=clamp).to_netcdf(tmp_path / "slice_out.nc")
    with xr.open_dataset(tmp_path / "rows.nc", mask_and_scale=False) as a, \
            xr.open_dataset(tmp_path / "slice_out.nc", mask_and_scale=False) as b:
        _same(a, b)


def test_project_file_decodes_packed_and_filled_values(fitted_logistic, reference_df,
                                                       slice_factory, tmp_path):
    ds = slice_factory(ny=10, nx=12).drop_vars("land")
    src = tmp_path / "packed.nc"
    enc = {"bio1": {"dtype": "int16", "scale_factor": 0.01, "_FillValue": -32768},
           "bio5": {"_FillValue": -9999.0}}
    ds.to_netcdf(src, encoding=enc)
    project_file(fitted_logistic, src, tmp_path / "out.nc", variables=VARS,
                 reference=reference_df, threshold=0.5)
    decoded = xr.open_dataset(src).load()  # reference: xarray's CF decoding of the same file
    exp = project_slice(fitted_logistic, decoded, variables=VARS, reference=reference_df,
                        threshold=0.5)
    with xr.open_dataset(tmp_path / "out.nc", mask_and_scale=False) as got:
        for v in exp.data_vars:
            np.testing.assert_array_equal(got[v].values, exp[v].values)


def test_project_file_errors(fitted_logistic, reference_df, slice_factory, tmp_path):
    src = tmp_path / "slice.nc"
    slice_factory().drop_vars(["land", "bio5"]).to_netcdf(src)
    with pytest.raises(DataError, match=r"slice\.nc: no predictor 'bio5'"):
        project_file(fitted_logistic, src, tmp_path / "o.nc", variables=VARS,
                     reference=reference_df, threshold=0.5)
    assert not (tmp_path / "o.nc").exists()
    bad = tmp_path / "not.nc"
    bad.write_text("plain text")
    with pytest.raises(InputFileError, match="cannot be opened as NetCDF"):
        project_file(fitted_logistic, bad, tmp_path / "o.nc", variables=VARS,
                     reference=reference_df, threshold=0.5)
