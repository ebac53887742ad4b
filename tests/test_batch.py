"""Helpers of kinset.fitting.batch checked against the pandas function they stand in for."""

import warnings

import numpy as np
import pandas as pd
import pytest

from kinset.fitting.batch import factorize_runs, row_nanmedian


@pytest.mark.parametrize("sort", [True, False])
@pytest.mark.parametrize("values", [
    [],                                              # empty
    ["D7"],                                          # one row
    ["D2", "D2", "D1", "D1", "D1", "D3"],            # runs, not in order
    ["D2", "D1", "D2", "D1", "D10", "D2", "D2"],     # a value back in a later run
    ["b", "a", "b", "b", "a", "c", "a", "a"],
])
def test_factorize_runs_is_pandas_factorize(values, sort):
    # Reference: pandas.factorize (codes and uniques, sorted or in first-appearance order)
    arr = np.asarray(values, dtype=object)
    codes, uniques = factorize_runs(arr, sort=sort)
    ref_codes, ref_uniques = pd.factorize(arr, sort=sort)
    assert codes.tolist() == ref_codes.tolist()
    assert list(uniques) == list(ref_uniques)


def test_factorize_runs_on_distinct_string_objects():
    # Equal ids that are different objects (not shared by a parser) still form one run;
    # reference: pandas.factorize.
    arr = np.asarray(["".join(["D", "1"]) for _ in range(3)] + ["D0"], dtype=object)
    assert factorize_runs(arr)[0].tolist() == pd.factorize(arr, sort=True)[0].tolist()


def test_row_nanmedian_is_numpy_nanmedian():
    # Reference: numpy.nanmedian along rows, value for value (ties, signed zeros, infinities,
    # all-NaN rows, odd and even counts); seeded.
    rng = np.random.default_rng(5)
    for _ in range(200):
        g, n = rng.integers(1, 6), rng.integers(0, 9)
        x = rng.choice([0.0, -0.0, 1.0, 2.5, -3.0, np.inf, -np.inf, np.nan, 7.0], size=(g, n))
        x = np.where(rng.random((g, n)) < 0.3, rng.normal(size=(g, n)), x)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)    # all-NaN rows
            ref = np.nanmedian(x, axis=1) if n else np.full(g, np.nan)
        np.testing.assert_array_equal(row_nanmedian(x), ref)
