"""The compiled per-cell loops give the same bits as the numpy formulas they replace.

Reference: the numpy evaluation of the same published formulas, operation by operation (MESS,
Elith, Kearney & Phillips 2010; ExDet NT1/NT2, Mesgaran, Cousens & Webber 2014), as the transfer
computed them before the loops were compiled. Compared with ``np.array_equal``: no tolerance.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from timeslice.transfer.kernels import exdet_cells, mess_cells, stack_finite
from timeslice.transfer.novelty import CountTable, exdet_parameters
from timeslice.transfer.reference import reference_table


def _mess_numpy(table: CountTable, good: np.ndarray):
    best = np.full(good.shape[1], np.inf)
    arg = np.zeros(good.shape[1], dtype=np.int16)
    for i in range(good.shape[0]):
        s = table.similarity(i, good[i])
        better = s < best
        np.copyto(best, s, where=better)
        np.copyto(arg, np.int16(i), where=better)
    return best, arg


def _exdet_numpy(p: dict, good: np.ndarray):
    k, n = good.shape
    nt1 = np.zeros(n)
    centred = np.empty_like(good)
    for i in range(k):
        d = np.minimum(good[i] - p["lo"][i], p["hi"][i] - good[i])
        np.minimum(d, 0.0, out=d)
        d /= p["hi"][i] - p["lo"][i]
        nt1 += d
        centred[i] = good[i] - p["mean"][i]
    d2 = np.zeros(n)
    for i in range(k):
        z = centred[0] * p["whiten"][i, 0]
        for j in range(1, i + 1):
            z += centred[j] * p["whiten"][i, j]
        d2 += z * z
    return nt1, d2 / p["d2_max"]


@pytest.fixture
def case(rng):
    k, m, n = 5, 3000, 20000
    ref = rng.normal(size=(m, k))
    ref[:, 1] += 0.6 * ref[:, 0]
    ref = np.round(ref, 2)  # ties between reference values
    target = rng.normal(0, 1.6, size=(k, n))
    target[:, :2000] = np.round(target[:, :2000], 2)  # ties with the reference
    target[:, 2000:2100] = ref[:100].T  # the reference points themselves
    target[:, 2100] = ref.min(axis=0)  # the range's edges
    target[:, 2101] = ref.max(axis=0)
    target = np.sort(target, axis=1)  # neighbours alike, as on a grid
    refset = reference_table(pd.DataFrame(ref, columns=[f"v{i}" for i in range(k)]))
    return refset, target


def test_stack_finite_equals_numpy(rng):
    x = rng.normal(size=(4, 1000)).astype(np.float32)
    x[1, ::7] = np.nan
    x[3, ::11] = np.inf
    good, valid = stack_finite(x)
    exp_valid = np.isfinite(x).all(axis=0)
    np.testing.assert_array_equal(valid, exp_valid)
    assert good.dtype == np.float64 and good.flags.c_contiguous
    assert np.array_equal(good, x[:, exp_valid].astype(np.float64))


def test_mess_cells_bit_identical(case):
    ref, good = case
    table = CountTable(np.sort(ref.values, axis=0))
    got, got_arg = mess_cells(good, *table.kernel_args())
    exp, exp_arg = _mess_numpy(table, good)
    assert np.array_equal(got, exp) and np.array_equal(got_arg, exp_arg)


def test_exdet_cells_bit_identical(case):
    ref, good = case
    p = exdet_parameters(ref)
    nt1, nt2 = exdet_cells(good, p["lo"], p["hi"], p["mean"], p["whiten"], p["d2_max"])
    e1, e2 = _exdet_numpy(p, good)
    assert np.array_equal(nt1, e1) and np.array_equal(nt2, e2)
    assert np.array_equal(nt1.astype(np.float32), e1.astype(np.float32))
