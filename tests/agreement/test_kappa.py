"""Percent agreement, Cohen's kappa and Landis & Koch bands."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from pipeline.agreement.kappa import (
    KAPPA_METHODS,
    chance_agreement,
    cohen_kappa,
    contingency_table,
    contingency_table_of_codes,
    kappa,
    landis_koch_band,
    landis_koch_bands,
    observed_agreement,
)
from pipeline.errors import ConfigError


def test_kappa_2x2_worked_example_n50():
    # Standard textbook worked example (CHECK_VALUES.md, Agreement, confirmed):
    # cells 20/5/10/15, n = 50: observed 0.70, expected 0.50, kappa 0.40.
    # Cohen (1960), "A coefficient of agreement for nominal scales".
    table = np.array([[20, 5], [10, 15]])
    assert observed_agreement(table) == pytest.approx(0.70)
    assert chance_agreement(table) == pytest.approx(0.50)
    assert cohen_kappa(table) == pytest.approx(0.40)


def test_kappa_2x2_worked_example_n20():
    # Standard worked example (CHECK_VALUES.md, Agreement, confirmed):
    # cells 12/2/4/2, n = 20: observed 0.70, expected 0.62, kappa ~ 0.21.
    table = np.array([[12, 2], [4, 2]])
    assert observed_agreement(table) == pytest.approx(0.70)
    assert chance_agreement(table) == pytest.approx(0.62)
    assert cohen_kappa(table) == pytest.approx(0.21, abs=0.005)
    # Landis & Koch (1977), Biometrics 33:159-174: 0.21-0.40 is "fair".
    assert landis_koch_band(cohen_kappa(table)) == "fair"


def test_contingency_table_orientation_rows_are_coder_a():
    a = ["tv", "tv", "phone", "none"]
    b = ["tv", "phone", "phone", "tv"]
    table, cats = contingency_table(a, b)
    assert cats == ["none", "phone", "tv"]
    # A said tv, B said phone: row tv, column phone
    assert table[cats.index("tv"), cats.index("phone")] == 1
    assert table[cats.index("none"), cats.index("tv")] == 1
    assert table.sum() == 4


@pytest.mark.parametrize("seed", range(5))
def test_kappa_matches_sklearn_on_random_labels(seed):
    # Reference implementation: sklearn.metrics.cohen_kappa_score (Cohen 1960).
    rng = np.random.default_rng(seed)
    cats = np.array(["none", "tv", "phone", "laptop", "magazine"])
    a = rng.choice(cats, size=500, p=[0.3, 0.3, 0.2, 0.15, 0.05])
    # B agrees with A most of the time, otherwise codes at random
    b = np.where(rng.random(500) < 0.6, a, rng.choice(cats, size=500))
    table, _ = contingency_table(a, b)
    assert cohen_kappa(table) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)
    assert observed_agreement(table) == pytest.approx(np.mean(a == b))


@pytest.mark.parametrize("seed", range(3))
def test_contingency_table_counts_like_a_loop_over_units(seed):
    rng = np.random.default_rng(seed)
    cats = ["laptop", "none", "phone", "tv"]
    a = rng.choice(cats, size=300)
    b = rng.choice(cats[1:], size=300)  # B never says laptop: still a row and column
    table, got = contingency_table(a, b)
    expected = np.zeros((4, 4), dtype=np.int64)
    for x, y in zip(a, b):
        expected[cats.index(x), cats.index(y)] += 1
    assert got == cats
    np.testing.assert_array_equal(table, expected)
    # the same from category positions, as the agreement stage passes them
    ia = np.array([cats.index(x) for x in a])
    ib = np.array([cats.index(y) for y in b])
    np.testing.assert_array_equal(contingency_table_of_codes(ia, ib, 4), expected)


def test_missing_labels_and_labels_outside_the_categories_are_refused():
    with pytest.raises(ValueError, match="missing"):
        contingency_table(["tv", None], ["tv", "tv"])
    with pytest.raises(ValueError, match="category list"):
        contingency_table(["tv", "radio"], ["tv", "tv"], categories=["tv"])
    with pytest.raises(ValueError, match="category list"):
        contingency_table_of_codes(np.array([0, -1]), np.array([0, 0]), 2)


def test_kappa_of_identical_constant_codes_is_undefined():
    # p_e = 1: both coders used one category for every unit; Cohen's formula is 0/0.
    table, _ = contingency_table(["tv"] * 10, ["tv"] * 10)
    assert observed_agreement(table) == 1.0
    assert np.isnan(cohen_kappa(table))
    assert np.isnan(cohen_kappa(np.zeros((2, 2))))


def test_kappa_stays_defined_when_one_category_is_very_rare():
    # Two evenings of coded seconds (200,000) with a single second of "phone", coded by
    # both coders at the same second: p_e = 1 - 1e-5, close to but not 1, so kappa is
    # defined and is 1 (perfect agreement). Reference implementation:
    # sklearn.metrics.cohen_kappa_score (Cohen 1960).
    a = np.array(["tv"] * 200_000, dtype=object)
    a[123_456] = "phone"
    b = a.copy()
    table, _ = contingency_table(a, b)
    assert 1.0 - chance_agreement(table) == pytest.approx(1e-5, rel=1e-3)
    assert cohen_kappa(table) == pytest.approx(cohen_kappa_score(a, b), abs=1e-9)
    assert cohen_kappa(table) == pytest.approx(1.0)
    # one disagreement more: still defined, and sklearn agrees
    b[7] = "phone"
    table, _ = contingency_table(a, b)
    assert cohen_kappa(table) == pytest.approx(cohen_kappa_score(a, b), abs=1e-9)


def test_kappa_registry_refuses_unknown_method_with_choices():
    assert kappa(np.array([[20, 5], [10, 15]]), method="cohen") == pytest.approx(0.40)
    with pytest.raises(ConfigError) as err:
        kappa(np.eye(2), method="fleiss")
    assert all(name in err.value.hint for name in KAPPA_METHODS)


@pytest.mark.parametrize("value, band", [
    # Landis & Koch (1977), Biometrics 33:159-174 (CHECK_VALUES.md, confirmed):
    # < 0 poor; 0-0.20 slight; 0.21-0.40 fair; 0.41-0.60 moderate;
    # 0.61-0.80 substantial; 0.81-1 almost perfect.
    (-0.05, "poor"),
    (0.0, "slight"),
    (0.20, "slight"),
    (0.21, "fair"),
    (0.40, "fair"),
    (0.41, "moderate"),
    (0.60, "moderate"),
    (0.61, "substantial"),
    (0.80, "substantial"),
    (0.81, "almost perfect"),
    (1.0, "almost perfect"),
    (float("nan"), ""),
])
def test_landis_koch_bands(value, band):
    assert landis_koch_band(value) == band


def test_landis_koch_bands_of_a_series_keep_the_index():
    s = pd.Series([0.1, 0.5, np.nan], index=["x", "y", "z"])
    out = landis_koch_bands(s)
    assert out.to_dict() == {"x": "slight", "y": "moderate", "z": ""}
