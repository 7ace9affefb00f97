"""Per-item survey comparisons."""

from itertools import combinations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

from pipeline.errors import ConfigError
from pipeline.models import compare_survey
from pipeline.models.survey import SURVEY_COLUMNS, compare_mann_whitney, compare_ordinal_logit


def survey_tables(seed=0, n=10, shift=2.5, items=("enjoy", "focus", "stress")):
    rng = np.random.default_rng(seed)
    roster = pd.DataFrame({"participant_id": [f"p{i}" for i in range(2 * n)],
                           "cohort": ["a"] * n + ["b"] * n})
    rows = []
    for item in items:
        for i, pid in enumerate(roster.participant_id):
            delta = shift if (i >= n and item == "enjoy") else 0.0
            rows.append({"participant_id": pid, "item": item,
                         "value": float(np.clip(np.round(rng.normal(4 + delta, 1.2)), 1, 7))})
    return pd.DataFrame(rows), roster


def test_rank_biserial_is_the_simple_difference_of_pair_shares():
    # Kerby (2014), "The simple difference formula": r = share of pairs favouring x minus
    # the share favouring y (ties count for neither).
    x = np.array([5, 6, 6, 7, 3, 5.0])
    y = np.array([4, 5, 2, 3, 3, 6, 1.0])
    pairs = np.subtract.outer(x, y)
    expected = (np.sum(pairs > 0) - np.sum(pairs < 0)) / pairs.size
    assert compare_mann_whitney(x, y)["effect"] == pytest.approx(expected)


def test_mann_whitney_exact_p_matches_enumeration_of_all_rank_assignments():
    # Mann & Whitney (1947): under H0 every assignment of the pooled ranks to the groups
    # is equally likely; the exact two-sided p is twice the smaller tail.
    x = np.array([1.2, 3.4, 5.9, 7.7])
    y = np.array([0.3, 0.8, 2.2, 2.9, 4.1])
    pooled = np.concatenate([x, y])
    ranks = pooled.argsort().argsort() + 1

    def u_of(idx):
        r = ranks[list(idx)].sum()
        return r - len(x) * (len(x) + 1) / 2

    us = np.array([u_of(c) for c in combinations(range(len(pooled)), len(x))])
    u_obs = u_of(range(len(x)))
    p = min(1.0, 2 * min(np.mean(us <= u_obs), np.mean(us >= u_obs)))
    res = compare_mann_whitney(x, y)
    assert res["statistic"] == u_obs
    assert res["p_value"] == pytest.approx(p)


def test_ordinal_logit_on_two_levels_is_the_2x2_log_odds_ratio():
    # With a binary response the proportional-odds model (McCullagh 1980) is logistic
    # regression: log OR = log(ad / bc), Woolf (1955) SE = sqrt(1/a + 1/b + 1/c + 1/d).
    x = np.array([1] * 9 + [0] * 3, dtype=float)   # a = 9 high, b = 3 low
    y = np.array([1] * 4 + [0] * 8, dtype=float)   # c = 4 high, d = 8 low
    res = compare_ordinal_logit(x, y)
    assert res["effect"] == pytest.approx(np.log(9 * 8 / (3 * 4)), rel=1e-4)
    se = np.sqrt(1 / 9 + 1 / 3 + 1 / 4 + 1 / 8)
    assert (res["ci_high"] - res["ci_low"]) / (2 * 1.959964) == pytest.approx(se, rel=1e-3)


def test_compare_survey_finds_the_shifted_item_and_adjusts_across_items():
    survey, roster = survey_tables()
    out = compare_survey(survey, roster, 0.05)
    assert list(out.columns) == SURVEY_COLUMNS
    assert list(out["item"]) == ["enjoy", "focus", "stress"]
    enjoy = out.set_index("item").loc["enjoy"]
    assert enjoy["effect"] > 0.5 and enjoy["p_value"] < 0.05
    assert enjoy["effect_measure"] == "rank_biserial_r"
    np.testing.assert_allclose(out.p_fdr, multipletests(out.p_value, method="fdr_bh")[1])


def test_ordinal_method_and_item_selection():
    survey, roster = survey_tables()
    out = compare_survey(survey, roster, 0.05, method="ordinal_logit", items=["enjoy"])
    assert list(out["item"]) == ["enjoy"]
    assert out["effect_measure"].iloc[0] == "log_odds_ratio"
    assert out["ci_low"].iloc[0] > 0


def test_no_survey_gives_an_empty_table_with_the_columns():
    roster = pd.DataFrame({"participant_id": ["p1"], "cohort": ["a"]})
    out = compare_survey(None, roster, 0.05)
    assert out.empty and list(out.columns) == SURVEY_COLUMNS


def test_guards_one_cohort_too_few_and_repeated_answers():
    survey, roster = survey_tables(n=8)
    one = roster.assign(cohort="a")
    out = compare_survey(survey, one, 0.05)
    assert out.note.str.contains("fewer than two cohorts").all() and out.p_value.isna().all()

    few = survey[~survey.participant_id.isin([f"p{i}" for i in range(8, 14)])]
    out = compare_survey(few, roster, 0.05)
    assert out.note.str.contains("too few participants answered \\(b: 2").all()

    twice = pd.concat([survey, survey.iloc[:1].assign(value=1.0)])
    out = compare_survey(twice, roster, 0.05)
    assert "1 participant(s) answered more than once" in out.note.iloc[0]


def test_unknown_survey_method_lists_choices():
    survey, roster = survey_tables()
    with pytest.raises(ConfigError) as err:
        compare_survey(survey, roster, 0.05, method="wilcoxon")
    assert "mann_whitney" in err.value.hint and "ordinal_logit" in err.value.hint


def test_survey_compares_only_the_included_cohorts_like_the_models():
    # Three cohorts; [cohorts] include = ["b", "c"] leaves cohort a's answers out, and
    # the reference is then the first included cohort, b, as in the models' plan.
    survey, roster = survey_tables(n=8)
    roster = pd.concat([roster, pd.DataFrame({"participant_id": [f"q{i}" for i in range(8)],
                                              "cohort": "c"})], ignore_index=True)
    extra = survey[survey.participant_id.isin([f"p{i}" for i in range(8)])]
    survey = pd.concat([survey, extra.assign(participant_id=extra.participant_id.str
                                             .replace("p", "q"))], ignore_index=True)
    out = compare_survey(survey, roster, 0.05, include=["c", "b"])
    assert set(out["cohort"]) == {"c"} and set(out["reference"]) == {"b"}
    by_hand = compare_survey(survey[~survey.participant_id.isin(roster.participant_id[
        roster.cohort == "a"])], roster[roster.cohort != "a"], 0.05)
    pd.testing.assert_frame_equal(out, by_hand)
    # every cohort compared when include is empty, as the models do
    assert set(compare_survey(survey, roster, 0.05, include=[])["cohort"]) == {"b", "c"}

    with pytest.raises(ConfigError, match="'z'"):
        compare_survey(survey, roster, 0.05, include=["b", "z"])
    out = compare_survey(survey, roster, 0.05, include=["b", "c"], reference="a")
    assert out.note.str.contains("reference cohort a is not among").all()
    assert out.p_value.isna().all()
