"""Helpers of kinset.fitting.batch checked against the pandas function they stand in for."""

import numpy as np
import pandas as pd
import pytest

from kinset.fitting.batch import factorize_runs


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
