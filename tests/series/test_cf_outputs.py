"""The series layers pass the CF 1.8 checker once written by the project's NetCDF writer."""

from __future__ import annotations

import contextlib
import io
import warnings

import pytest

from timeslice.errors import TimesliceWarning
from timeslice.series import analyse_series


def _run_checker(path):
    runner = pytest.importorskip("compliance_checker.runner")
    suite = runner.CheckSuite()
    suite.load_all_available_checkers()
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        passed, _ = runner.ComplianceChecker.run_checker(
            str(path), ["cf:1.8"], 0, "normal", output_filename="-", output_format="text")
    return passed, buf.getvalue()


def test_series_and_ensemble_pass_cf_checker(stack_factory, tmp_path):
    # compliance-checker (IOOS, runs offline) with the cf:1.8 suite is the reference
    from timeslice.report import write_series

    labels = ("baseline", "a_21ka", "b_21ka", "a_low", "b_low", "a_high", "b_high")
    ds = stack_factory(labels=labels, years=(1990, -19050, -19050, 2090, 2090, 2090, 2090),
                       models=("observed", "a", "b", "a", "b", "a", "b"),
                       scenarios=("baseline", "past", "past", "low", "low", "high", "high"))
    ds = ds.assign_coords(period=("slice", ["now", "21 ka", "21 ka"] + ["2081-2100"] * 4))
    for v in ds.data_vars:
        ds[v].attrs.setdefault("long_name", v)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimesliceWarning)
        res = analyse_series(ds, rate="1 km/yr")
    for name, obj in (("series", res.series), ("ensemble", res.ensemble)):
        path = write_series(obj, tmp_path / f"{name}.nc")
        passed, text = _run_checker(path)
        assert passed, text
