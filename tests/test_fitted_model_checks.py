"""A model fitted earlier is checked against the run's baseline before it is transferred."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.niche.persist import save_model
from timeslice.niche.workflow import NicheFit
from timeslice.pipeline import fitted_model as _fitted_model


def _fit():
    bg = pd.DataFrame({"lon": [0.0] * 50, "lat": [0.0] * 50,
                       "bio1": np.linspace(5, 15, 50), "bio12": np.linspace(400, 900, 50)})
    empty = pd.DataFrame()
    return NicheFit(model=None, variables=["bio1", "bio12"], threshold=0.5, presence=bg.head(5),
                    background=bg, calibration_area=xr.DataArray([True]), cleaning=empty,
                    screening=empty, evaluation=empty, response=empty, importance=empty)


def _baseline(scale=1.0):
    v = np.linspace(6, 14, 16).reshape(4, 4) * scale
    return xr.Dataset({"bio1": (("lat", "lon"), v),
                       "bio12": (("lat", "lon"), np.full((4, 4), 650.0)),
                       "land": (("lat", "lon"), np.ones((4, 4), bool))},
                      coords={"lat": np.arange(4.0), "lon": np.arange(4.0)})


def test_same_units_pass_and_other_units_are_refused(tmp_path):
    path = save_model(_fit(), tmp_path / "model.pkl")
    assert _fitted_model(path, _baseline()).variables == ["bio1", "bio12"]
    # the baseline's bio1 in degC x 10: far outside the model's calibration range
    with pytest.raises(DataError, match=r"niche.model.*'bio1'.*units or scale differ"):
        _fitted_model(path, _baseline(scale=10.0))
    with pytest.raises(DataError, match=r"uses \['bio1', 'bio12'\]|which the baseline does not have"):
        _fitted_model(path, _baseline().drop_vars("bio12"))
