"""Per-distinct-value helpers of the cell checks, on text and on categorical columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.ingest import cells


def _column(values: list[str], categorical: bool) -> pd.Series:
    text = pd.Series(values, dtype=object)
    return text.astype("category") if categorical else text


@pytest.mark.parametrize("categorical", [False, True])
def test_distinct_values_give_back_the_column(categorical):
    values = ["b", "a", "", "b", "c", "a"]
    codes, distinct = cells.distinct(_column(values, categorical))
    assert distinct[codes].tolist() == values
    assert sorted(distinct) == ["", "a", "b", "c"]


@pytest.mark.parametrize("categorical", [False, True])
@pytest.mark.parametrize("n_values", [3, 2000])  # few pairs are counted, many hashed
def test_pair_codes_code_each_row_by_its_pair(categorical, n_values):
    rng = np.random.default_rng(n_values)
    a = [f"a{i}" for i in rng.integers(0, n_values, 5000)]
    b = [f"b{i}" for i in rng.integers(0, n_values, 5000)]
    inverse, pairs = cells.pair_codes(_column(a, categorical), _column(b, categorical))
    assert len(set(pairs)) == len(pairs) == len(set(zip(a, b)))
    assert [pairs[k] for k in inverse] == list(zip(a, b))


def test_pair_codes_of_no_rows():
    inverse, pairs = cells.pair_codes(pd.Series([], dtype=object), pd.Series([], dtype=object))
    assert len(inverse) == 0 and pairs == []
