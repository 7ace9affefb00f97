"""Krippendorff's alpha (nominal) from the coincidence matrix."""

from __future__ import annotations

import krippendorff
import numpy as np
import pandas as pd
import pytest

from pipeline.agreement.alpha import (
    alpha,
    coincidence_matrix,
    counts_from_positions,
    pooled_alpha_from_coincidences,
    pooled_alpha_nominal,
    value_counts_by_unit,
)
from pipeline.errors import ConfigError

NA = np.nan

# Krippendorff (2011), "Computing Krippendorff's alpha-reliability", section C
# (nominal data, 4 observers, 12 units, missing values). Reported alpha = 0.743.
# from memory (the table and value); the krippendorff package is checked alongside.
K2011 = np.array([
    [1, 2, 3, 3, 2, 1, 4, 1, 2, NA, NA, NA],
    [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, NA, 3],
    [NA, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, NA],
    [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, NA],
])


def _as_units_by_coders(data: np.ndarray) -> pd.DataFrame:
    """coders x units float array (NaN missing) -> units x coders labels (None missing)."""
    frame = pd.DataFrame(data.T).astype(object)
    return frame.where(~np.isnan(data.T), None).map(
        lambda v: None if v is None else str(int(v)))


def test_alpha_krippendorff_2011_nominal_example():
    value = alpha(_as_units_by_coders(K2011))
    assert value == pytest.approx(0.743, abs=5e-4)  # Krippendorff (2011); from memory
    ref = krippendorff.alpha(reliability_data=K2011, level_of_measurement="nominal")
    assert value == pytest.approx(ref, abs=1e-12)


def test_coincidence_matrix_totals_pairable_values():
    # Krippendorff (2011): n = number of pairable values; unit 12 (one value) drops out.
    counts, cats = value_counts_by_unit(_as_units_by_coders(K2011))
    o = coincidence_matrix(counts)
    assert np.allclose(o, o.T)
    assert o.sum() == pytest.approx(40)  # 41 values, minus the lone value of unit 12
    assert cats == ["1", "2", "3", "4", "5"]


def test_alpha_binary_two_coders_example():
    # Krippendorff (2011), section A (binary data, two observers, 10 units):
    # alpha = 0.095. from memory; checked against the krippendorff package.
    data = np.array([[0, 1, 0, 0, 0, 0, 0, 0, 1, 0],
                     [1, 1, 1, 0, 0, 1, 0, 0, 0, 0]], dtype=float)
    value = alpha(_as_units_by_coders(data))
    assert value == pytest.approx(0.095, abs=5e-4)
    assert value == pytest.approx(
        krippendorff.alpha(reliability_data=data, level_of_measurement="nominal"), abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_alpha_matches_krippendorff_package_with_missing_values(seed):
    # Reference implementation: krippendorff (PyPI), nominal level.
    rng = np.random.default_rng(seed)
    n_coders, n_units = int(rng.integers(2, 6)), 300
    truth = rng.integers(0, 4, n_units)
    data = np.where(rng.random((n_coders, n_units)) < 0.7, truth,
                    rng.integers(0, 4, (n_coders, n_units))).astype(float)
    data[rng.random(data.shape) < 0.2] = np.nan
    ref = krippendorff.alpha(reliability_data=data, level_of_measurement="nominal")
    assert alpha(_as_units_by_coders(data)) == pytest.approx(ref, abs=1e-10)


def test_value_counts_by_unit_count_like_a_loop_over_cells():
    rng = np.random.default_rng(7)
    labels = np.array(["tv", "phone", "none", None, np.nan], dtype=object)
    codes = pd.DataFrame(labels[rng.integers(0, 5, (200, 3))], index=rng.permutation(200) + 3)
    counts, cats = value_counts_by_unit(codes)
    assert cats == ["none", "phone", "tv"]
    expected = np.zeros((200, 3), dtype=np.int64)
    for u, row in enumerate(codes.itertuples(index=False)):
        for v in row:
            if not pd.isna(v):
                expected[u, cats.index(v)] += 1
    np.testing.assert_array_equal(counts, expected)
    with pytest.raises(ValueError):
        value_counts_by_unit(codes, categories=["tv", "phone"])


def test_alpha_is_one_for_perfect_agreement_and_undefined_for_one_value():
    perfect = pd.DataFrame({"a": ["tv", "phone", "none"], "b": ["tv", "phone", "none"],
                            "c": ["tv", "phone", None]})
    assert alpha(perfect) == pytest.approx(1.0)
    one_value = pd.DataFrame({"a": ["tv"] * 4, "b": ["tv"] * 4, "c": ["tv"] * 4})
    assert np.isnan(alpha(one_value))  # D_e = 0: Krippendorff (2011) leaves alpha undefined
    nothing_pairable = pd.DataFrame({"a": ["tv", None], "b": [None, "phone"]})
    assert np.isnan(alpha(nothing_pairable))


def test_alpha_of_two_coders_differs_from_kappa_only_by_small_sample_term():
    # With two coders and no missing values, nominal alpha and Scott's pi differ by
    # the factor (n-1)/n on the disagreement (Krippendorff 2011; from memory).
    rng = np.random.default_rng(7)
    a = rng.integers(0, 3, 2000).astype(float)
    b = np.where(rng.random(2000) < 0.8, a, rng.integers(0, 3, 2000)).astype(float)
    value = alpha(_as_units_by_coders(np.vstack([a, b])))
    # Scott's pi from pooled marginals
    po = np.mean(a == b)
    p = np.bincount(np.concatenate([a, b]).astype(int)) / 4000
    pi = (po - np.sum(p**2)) / (1 - np.sum(p**2))
    n = 4000
    assert value == pytest.approx(1 - (n - 1) / n * (1 - pi), abs=1e-12)


def test_alpha_unknown_level_lists_choices():
    with pytest.raises(ConfigError) as err:
        alpha(pd.DataFrame({"a": ["x"], "b": ["y"]}), level="ordinal")
    assert "nominal" in err.value.hint


def test_pooled_alpha_splits_the_2011_example_without_changing_it():
    # Coincidences add over units (Krippendorff 2011, section C), so alpha over the
    # example's 12 units is the same whether they are pooled as one table or as three
    # tables with different coder columns (one coder absent from one table).
    units = _as_units_by_coders(K2011)
    parts = [units.iloc[:5], units.iloc[5:9], units.iloc[9:].drop(columns=[0])]
    assert pooled_alpha_nominal(parts) == pytest.approx(alpha(units), abs=1e-12)
    assert round(pooled_alpha_nominal(parts), 3) == 0.743
    assert np.isnan(pooled_alpha_nominal([]))


def test_pooled_alpha_from_per_part_coincidences_over_their_own_categories():
    # The same split of Krippendorff's (2011) example, each part summarised by the
    # coincidence matrix over only the values it holds (as each session's agreement
    # result carries it): summed over the union of values, alpha is still 0.743.
    units = _as_units_by_coders(K2011)
    parts = [units.iloc[:5], units.iloc[5:9], units.iloc[9:].drop(columns=[0])]
    summaries = []
    for part in parts:
        counts, cats = value_counts_by_unit(part)
        summaries.append((cats, coincidence_matrix(counts)))
    assert [len(c) for c, _ in summaries] == [3, 4, 3]  # each part has its own values
    assert pooled_alpha_from_coincidences(summaries) == pytest.approx(alpha(units), abs=1e-12)
    assert round(pooled_alpha_from_coincidences(summaries), 3) == 0.743
    assert np.isnan(pooled_alpha_from_coincidences([]))


def test_counts_from_positions_matches_counts_from_labels():
    # the integer form gives the same units-by-categories counts as the text form
    units = _as_units_by_coders(K2011)
    counts, cats = value_counts_by_unit(units)
    index = {c: i for i, c in enumerate(cats)}
    positions = units.apply(lambda col: col.map(lambda v: -1 if pd.isna(v) else index[str(v)]))
    np.testing.assert_array_equal(counts_from_positions(positions.to_numpy(), len(cats)), counts)
