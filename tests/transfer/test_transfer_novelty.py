"""MESS and ExDet against hand-worked examples built from the published formulas, a direct
per-cell evaluation of the formula, and scipy's Mahalanobis distance."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.spatial.distance
import xarray as xr

from timeslice.errors import DataError
from timeslice.transfer.novelty import combined, exdet, exdet_parameters, exdet_values, mess, mess_values, reference_table


def _target(values: np.ndarray, names) -> xr.Dataset:
    """Points as a Dataset along a `cell` dim."""
    return xr.Dataset({n: ("cell", values[:, i]) for i, n in enumerate(names)})


# --------------------------------------------------------------------------------- MESS cases
# Worked examples constructed by hand from the MESS formula of Elith, Kearney & Phillips (2010,
# Methods Ecol. Evol. 1:330), with f = percent of reference values strictly smaller than p
# (the convention pinned in METHODS.md). The numbers below are our own arithmetic, not values
# printed in the paper.
REF_A = np.arange(1.0, 11.0)  # 1..10, min 1, max 10, range 9
CASES_A = [
    (0.1, 100 * (0.1 - 1) / 9),  # f = 0, below the minimum: -10
    (1.0, 0.0),                  # f = 0 at the minimum: 0
    (3.0, 40.0),                 # 2 of 10 smaller: f = 20 -> 2f
    (5.5, 100.0),                # f = 50 -> 2f = 100
    (6.0, 100.0),                # still 5 smaller: f = 50
    (8.0, 60.0),                 # f = 70 -> 2(100 - 70)
    (10.0, 20.0),                # at the maximum: f = 90 -> 20
    (11.8, 100 * (10 - 11.8) / 9),  # f = 100, above the maximum: -20
]
REF_B = np.array([0.0, 0, 0, 1, 1, 2, 3, 3, 4, 4])  # ties; min 0, max 4
CASES_B = [
    (-2.0, -50.0),  # f = 0: 100 * (-2 - 0) / 4
    (0.0, 0.0),     # f = 0 (ties at the minimum are not "smaller")
    (1.0, 60.0),    # 3 strictly smaller: f = 30 -> 60
    (3.0, 80.0),    # 6 strictly smaller: f = 60 -> 80
    (4.0, 40.0),    # 8 strictly smaller: f = 80 -> 40
    (4.4, -10.0),   # f = 100: 100 * (4 - 4.4) / 4
]


@pytest.mark.parametrize(("ref", "cases"), [(REF_A, CASES_A), (REF_B, CASES_B)])
def test_mess_univariate_worked_cases(ref, cases):
    p = np.array([c[0] for c in cases])
    expected = np.array([c[1] for c in cases])
    out = mess(pd.DataFrame({"x": ref}), _target(p[:, None], ["x"]))
    np.testing.assert_allclose(out["mess"].values, expected, rtol=1e-6, atol=1e-5)
    assert (out["most_dissimilar"].values == 0).all()


def test_mess_multivariate_min_and_first_on_ties():
    # MESS = min over variables, most dissimilar = argmin, first on ties (METHODS.md).
    ref = pd.DataFrame({"a": REF_A, "b": REF_B})
    p = np.array([[3.0, 3.0], [8.0, 1.0], [10.0, 4.4], [0.1, -2.0]])
    out = mess(ref, _target(p, ["a", "b"]))
    # S from the worked cases above: (40, 80), (60, 60), (20, -10), (-10, -50)
    np.testing.assert_allclose(out["mess"].values, [40, 60, -10, -50], atol=1e-5)
    np.testing.assert_array_equal(out["most_dissimilar"].values, [0, 0, 1, 1])
    assert out["most_dissimilar"].attrs["flag_meanings"] == "a b"
    np.testing.assert_array_equal(out["most_dissimilar"].attrs["flag_values"], [0, 1])


def _mess_direct(ref: np.ndarray, p: np.ndarray) -> tuple[float, int]:
    """Literal per-cell evaluation of the published case formula (Elith et al. 2010)."""
    m = ref.shape[0]
    best, arg = np.inf, -1
    for i in range(ref.shape[1]):
        r = ref[:, i]
        lo, hi = r.min(), r.max()
        f = 100.0 * np.sum(r < p[i]) / m
        if f == 0:
            s = 100.0 * (p[i] - lo) / (hi - lo)
        elif f <= 50:
            s = 2.0 * f
        elif f < 100:
            s = 2.0 * (100.0 - f)
        else:
            s = 100.0 * (hi - p[i]) / (hi - lo)
        if s < best:  # strict: the first variable wins ties
            best, arg = s, i
    return best, arg


def test_mess_kernel_matches_direct_formula_with_ties(rng):
    # Integer-valued data make many ties between reference values, targets and variables.
    ref = rng.integers(0, 8, size=(60, 4)).astype(float)
    ref[0], ref[1] = 0.0, 7.0  # guarantee a non-zero range in every column
    p = rng.integers(-2, 10, size=(500, 4)).astype(float)
    p[::7] += rng.uniform(-0.5, 0.5, size=p[::7].shape)
    got_mess, got_mod = mess_values(np.sort(ref, axis=0), p)
    exp = [_mess_direct(ref, row) for row in p]
    np.testing.assert_allclose(got_mess, [e[0] for e in exp], rtol=1e-12, atol=1e-12)
    # Ties: decided in exact arithmetic (a float evaluation of 2f and 2(100 - f) can split
    # a tie by one ulp); the first tied variable must win.
    for row, g_mod in zip(p, got_mod):
        s = _mess_exact(ref, row)
        best = min(v for v, _ in s)
        assert g_mod == [i for i, (v, _) in enumerate(s) if v == best][0]


def test_mess_kernel_nan_and_shape():
    ref = np.sort(np.array([[0.0, 0.0], [1.0, 2.0], [2.0, 4.0]]), axis=0)
    vals = np.array([[[0.5, 1.0], [np.nan, 1.0]], [[1.0, np.inf], [3.0, 5.0]]])
    m, k = mess_values(ref, vals)
    assert m.shape == (2, 2) and k.dtype == np.int16
    assert np.isnan(m[0, 1]) and k[0, 1] == -1
    assert np.isnan(m[1, 0]) and k[1, 0] == -1  # inf is not a usable value either
    assert np.isfinite(m[1, 1])


def test_mess_reference_points_are_not_novel(reference_df):
    # Every reference point lies inside its own ranges: S_i >= 0 by construction of the formula.
    out = mess(reference_df, _target(reference_df.to_numpy(), list(reference_df.columns)))
    assert float(out["mess"].min()) >= 0.0


def test_mess_dataset_reference_equals_dataframe(reference_df, slice_factory):
    ds = slice_factory(shift=0.5, scale=1.5)
    ref_ds = xr.Dataset({c: ("point", reference_df[c].to_numpy()) for c in reference_df})
    a = mess(reference_df, ds)
    b = mess(ref_ds, ds)
    xr.testing.assert_identical(a, b)


def test_mess_grid_attrs_nan_and_dask(reference_df, slice_factory, no_compute):
    ds = slice_factory(shift=0.5, scale=1.5)
    eager = mess(reference_df, ds)
    assert eager["mess"].dims == ("lat", "lon") and eager["mess"].dtype == np.float32
    assert eager["most_dissimilar"].dtype == np.int16
    assert eager["most_dissimilar"].encoding["_FillValue"] == -1
    sea = ~ds["land"].values
    assert np.isnan(eager["mess"].values[sea]).all()
    assert (eager["most_dissimilar"].values[sea] == -1).all()
    for v in ("mess", "most_dissimilar"):
        for key in ("units", "long_name", "description", "reference_set"):
            assert key in eager[v].attrs
    with no_compute():
        lazy = mess(reference_df, ds.chunk({"lat": 5, "lon": 7}))
    assert lazy["mess"].chunks is not None
    xr.testing.assert_identical(lazy.compute(), eager)


def test_mess_zero_range_names_variable():
    ref = pd.DataFrame({"bio1": [1.0, 2.0, 3.0], "bio7": [5.0, 5.0, 5.0]})
    with pytest.raises(DataError, match="'bio7' has zero range"):
        mess(ref, _target(np.ones((2, 2)), ["bio1", "bio7"]))


def test_reference_errors_name_variable():
    with pytest.raises(DataError, match="'bio2'.*missing"):
        reference_table(pd.DataFrame({"bio2": [1.0, np.nan, 3.0]}))
    with pytest.raises(DataError, match="no variable 'bio3'"):
        reference_table(pd.DataFrame({"bio2": [1.0, 2.0]}), variables=["bio3"])
    with pytest.raises(DataError, match="at least 2"):
        reference_table(pd.DataFrame({"bio2": [1.0]}))
    with pytest.raises(DataError, match="`point`"):
        reference_table(xr.Dataset({"bio2": (("a", "b"), np.ones((2, 2)))}))


def test_target_missing_variable():
    ref = pd.DataFrame({"bio1": [1.0, 2.0], "bio12": [3.0, 5.0]})
    with pytest.raises(DataError, match="target` has no variable 'bio12'"):
        mess(ref, _target(np.ones((3, 1)), ["bio1"]))


# -------------------------------------------------------------------------------------- ExDet


def test_nt1_worked_example():
    # Constructed from the NT1 definition of Mesgaran, Cousens & Webber (2014, Divers. Distrib.
    # 20:1147): sum_i min(p - min_i, max_i - p, 0) / (max_i - min_i). Ranges [0, 10] and [0, 2].
    ref = pd.DataFrame({"u": [0.0, 10.0, 5.0, 2.0], "v": [0.0, 2.0, 1.0, 1.5]})
    p = np.array([[12.0, -1.0], [5.0, 1.0], [-5.0, 3.0], [10.0, 0.0]])
    out = exdet(ref, _target(p, ["u", "v"]))
    # (12, -1): -2/10 + -1/2 = -0.7; inside: 0; (-5, 3): -0.5 - 0.5 = -1.0; on the edges: 0
    np.testing.assert_allclose(out["nt1"].values, [-0.7, 0.0, -1.0, 0.0], atol=1e-7)


def test_nt2_worked_example_novel_combination():
    # Constructed from the NT2 definition (Mesgaran et al. 2014): reference points (+-1, 0),
    # (0, +-1) have mean 0 and covariance (2/3) I (n - 1 divisor), so D^2(x) = 1.5 |x|^2 and
    # max_r D^2(r) = 1.5: NT2(x) = |x|^2. The point (1, 1) is inside both univariate ranges
    # (NT1 = 0) but is a combination never seen in the reference (NT2 = 2 > 1).
    ref = pd.DataFrame({"u": [1.0, -1.0, 0.0, 0.0], "v": [0.0, 0.0, 1.0, -1.0]})
    p = np.array([[2.0, 0.0], [1.0, 1.0], [0.0, 0.0], [0.5, 0.0]])
    out = exdet(ref, _target(p, ["u", "v"]))
    np.testing.assert_allclose(out["nt2"].values, [4.0, 2.0, 0.0, 0.25], rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(out["nt1"].values, [-0.5, 0.0, 0.0, 0.0], atol=1e-7)
    comb = combined(out["nt1"], out["nt2"])
    np.testing.assert_allclose(comb.values, [-0.5, 2.0, 0.0, 0.25], rtol=1e-6, atol=1e-7)


def test_nt2_matches_scipy_mahalanobis(reference_df, rng):
    # Reference: scipy.spatial.distance.mahalanobis with VI = inverse sample covariance.
    x = reference_df.to_numpy()
    vi = np.linalg.inv(np.cov(x, rowvar=False))
    mu = x.mean(axis=0)
    d2 = lambda q: scipy.spatial.distance.mahalanobis(q, mu, vi) ** 2  # noqa: E731
    d2_max = max(d2(r) for r in x)
    p = rng.normal(0, 2, size=(300, 3))
    expected = np.array([d2(q) for q in p]) / d2_max
    params = exdet_parameters(reference_table(reference_df))
    _, nt2 = exdet_values(values=p, **params)
    np.testing.assert_allclose(nt2, expected, rtol=1e-10)
    out = exdet(reference_df, _target(p, list(reference_df.columns)))
    np.testing.assert_allclose(out["nt2"].values, expected, rtol=2e-6)
    # Reference points themselves: NT1 = 0 and NT2 <= 1 (the maximum is one of them).
    own = exdet(reference_df, _target(x, list(reference_df.columns)))
    assert float(abs(own["nt1"]).max()) == 0.0
    assert float(own["nt2"].max()) == pytest.approx(1.0, rel=1e-6)


def test_exdet_grid_nan_dask_and_attrs(reference_df, slice_factory, no_compute):
    ds = slice_factory(shift=0.3, scale=2.0)
    eager = exdet(reference_df, ds)
    sea = ~ds["land"].values
    assert np.isnan(eager["nt1"].values[sea]).all() and np.isnan(eager["nt2"].values[sea]).all()
    assert (eager["nt1"].values[~sea] <= 0).all() and (eager["nt2"].values[~sea] >= 0).all()
    for v in ("nt1", "nt2"):
        assert eager[v].dtype == np.float32
        for key in ("units", "long_name", "description", "reference_set"):
            assert key in eager[v].attrs
    with no_compute():
        lazy = exdet(reference_df, ds.chunk({"lat": 4, "lon": 5}))
    xr.testing.assert_identical(lazy.compute(), eager)


def test_exdet_singular_covariance_is_data_error(rng):
    a = rng.normal(size=50)
    ref = pd.DataFrame({"bio1": a, "bio6": 2.0 * a + 1.0})
    with pytest.raises(DataError, match="singular.*collinear"):
        exdet(ref, _target(np.zeros((2, 2)), ["bio1", "bio6"]))


# ------------------------------------------------------------------------------ properties
from fractions import Fraction  # noqa: E402

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402
from hypothesis.extra.numpy import arrays  # noqa: E402

_small_floats = st.floats(-50, 50, allow_nan=False, width=32).map(lambda v: round(v, 1))


def _mess_exact(ref: np.ndarray, p: np.ndarray) -> list[tuple[Fraction, bool]]:
    """Per-variable S in exact rational arithmetic (Elith et al. 2010 cases), and whether it
    came from one of the two middle cases."""
    m = ref.shape[0]
    out = []
    for i in range(ref.shape[1]):
        r = [Fraction(v) for v in ref[:, i]]
        lo, hi, x = min(r), max(r), Fraction(p[i])
        f = Fraction(100 * sum(v < x for v in r), m)
        if f == 0:
            out.append((100 * (x - lo) / (hi - lo), False))
        elif f == 100:
            out.append((100 * (hi - x) / (hi - lo), False))
        else:
            out.append((2 * f if f <= 50 else 2 * (100 - f), True))
    return out


@settings(max_examples=50, deadline=None)
@given(
    ref=arrays(np.float64, st.tuples(st.integers(2, 25), st.just(3)), elements=_small_floats),
    p=arrays(np.float64, st.tuples(st.integers(1, 25), st.just(3)), elements=_small_floats),
)
def test_mess_kernel_equals_formula_property(ref, p):
    # Rounded values make ties between reference values, targets and variables common. The
    # published formula is evaluated in exact rational arithmetic; the most dissimilar variable
    # must be the first of the exact ties (always when the tie is between middle-case values,
    # which are exact in floating point too; otherwise one of the tied variables).
    ref = ref.copy()
    ref[0] = ref.min(axis=0)
    ref[1] = ref.max(axis=0) + 1.0  # non-zero range in every column
    got_mess, got_mod = mess_values(np.sort(ref, axis=0), p)
    for row, g_mess, g_mod in zip(p, got_mess, got_mod):
        s = _mess_exact(ref, row)
        best = min(v for v, _ in s)
        tied = [i for i, (v, _) in enumerate(s) if v == best]
        assert g_mess == pytest.approx(float(best), rel=1e-12, abs=1e-9)
        if all(s[i][1] for i in tied) or len(tied) == 1:
            assert g_mod == tied[0]
        else:
            assert g_mod in tied


@settings(max_examples=30, deadline=None)
@given(p=arrays(np.float64, st.tuples(st.integers(1, 30), st.just(3)),
                elements=st.floats(-20, 20, allow_nan=False)))
def test_exdet_signs_property(p):
    # NT1 <= 0 with equality exactly inside every range; NT2 >= 0 (definitions, Mesgaran 2014).
    rng = np.random.default_rng(3)
    ref = pd.DataFrame(rng.normal(0, 2, size=(40, 3)), columns=["a", "b", "c"])
    out = exdet(ref, _target(p, ["a", "b", "c"]))
    lo, hi = ref.min().to_numpy(), ref.max().to_numpy()
    inside = ((p >= lo) & (p <= hi)).all(axis=1)
    nt1 = out["nt1"].values
    assert (nt1 <= 0).all() and (nt1[inside] == 0).all() and (nt1[~inside] < 0).all()
    assert (out["nt2"].values >= 0).all()


def test_nt2_predictors_in_very_different_units(rng):
    # Scales 1e-4 and 1e5 make the covariance ill-conditioned but not collinear: no error, and
    # NT2 still equals the scipy.spatial.distance.mahalanobis ratio.
    x = np.column_stack([rng.normal(0, 1e-4, 300), rng.normal(5e5, 1e5, 300), rng.normal(0, 1, 300)])
    ref = pd.DataFrame(x, columns=["a", "b", "c"])
    vi = np.linalg.inv(np.cov(x, rowvar=False))
    mu = x.mean(axis=0)
    d2 = lambda q: scipy.spatial.distance.mahalanobis(q, mu, vi) ** 2  # noqa: E731
    d2_max = max(d2(r) for r in x)
    p = x[:20] * 1.5
    out = exdet(ref, _target(p, ["a", "b", "c"]))
    np.testing.assert_allclose(out["nt2"].values, [d2(q) / d2_max for q in p], rtol=1e-5)
