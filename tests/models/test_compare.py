"""The models stage end to end on simulated study tables."""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from pipeline.config import CohortSettings, ModelSettings
from pipeline.errors import ConfigError
from pipeline.models import COMPARISON_COLUMNS, compare

from models_tables import make_tables

CONTRACT_COLUMNS = ["outcome", "model", "term", "estimate", "std_error", "ci_low", "ci_high",
                    "p_value", "p_fdr", "n_participants", "n_obs", "scale"]


#: Only the switch rate and one state outcome, where a test needs no more (fast).
FEW = dict(session_outcomes=["switches_per_hour"], state_outcomes=["arousal_range"])


def run(tables, models=None, cohorts=None, **kw):
    s, st, g, r = tables
    return compare(s, st, g, r, models or ModelSettings(), cohorts or CohortSettings(), **kw)


@pytest.fixture(scope="module")
def full():
    """Every default outcome of the default simulated study, fitted once."""
    return run(make_tables())


def term(res, outcome, name, model="mixed_reml"):
    c = res.comparisons
    row = c[(c.outcome == outcome) & (c.term == name) & (c.model == model)]
    assert len(row) == 1, row
    return row.iloc[0]


def test_comparisons_have_contract_columns_and_every_configured_outcome(full):
    res = full
    c = res.comparisons
    # CONTRACT §3 columns first, in order, then converged and note
    assert list(c.columns[:len(CONTRACT_COLUMNS)]) == CONTRACT_COLUMNS
    assert {"converged", "note"} <= set(c.columns)
    assert list(c.columns) == COMPARISON_COLUMNS
    outcomes = set(c.outcome)
    assert {"switches_per_hour", "media_hours", "multi_share", "dwell_median_s[print]",
            "dwell_median_s[screen]", "switches", "arousal_range", "arousal_p95",
            "arousal_p05", "arousal_mean", "scr_per_min", "hr_mean_bpm"} <= outcomes
    assert term(res, "switches_per_hour", "cohort[b]")["scale"] == "log"
    assert term(res, "media_hours", "cohort[b]")["scale"] == "identity"
    assert term(res, "switches", "cohort[b]", "poisson_gee")["scale"] == "log"
    # participants are the unit: 16 participants, 48 sessions
    row = term(res, "switches_per_hour", "cohort[b]")
    assert row["n_participants"] == 16 and row["n_obs"] == 48
    assert row["df"] == 14  # between-participant term: 16 participants - 2


def test_state_model_has_the_interaction_and_only_single_and_multi(full):
    res = full
    c = res.comparisons[res.comparisons.outcome == "arousal_range"]
    assert set(c.term) >= {"Intercept", "cohort[b]", "state[multi]", "cohort[b]:state[multi]"}
    assert not any("none" in t for t in c.term)
    assert c.n_obs.iloc[0] == 96  # 48 sessions x 2 states
    # the simulation compresses the multi range to 0.8 of the single range (mean about
    # 1.0): the state term is negative and clearly so
    row = term(res, "arousal_range", "state[multi]")
    assert row["ci_high"] < 0


def test_interaction_detects_more_compression_in_one_cohort():
    tables = make_tables(seed=5, n_per_cohort=12, compression=0.9, compression_b=0.5)
    res = run(tables, models=ModelSettings(**FEW))
    row = term(res, "arousal_range", "cohort[b]:state[multi]")
    assert row["estimate"] < 0 and row["p_value"] < 0.01
    assert any("multi - single difference, b vs a" in line for line in res.summary)


def test_switch_rate_ratio_is_back_transformed_in_the_summary(full):
    res = full
    row = term(res, "switches_per_hour", "cohort[b]")
    line = next(x for x in res.summary if x.startswith("switches_per_hour, b vs a"))
    assert f"rate ratio {np.exp(row['estimate']):.2f}" in line
    assert f"{np.exp(row['ci_low']):.2f} to {np.exp(row['ci_high']):.2f}" in line
    media = next(x for x in res.summary if x.startswith("media_hours, b vs a"))
    assert "difference" in media and " h " in media
    assert any("count model (poisson_gee) agrees" in x or "DISAGREE" in x for x in res.summary)


def test_fdr_is_benjamini_hochberg_over_the_cohort_terms_of_the_mixed_models(full):
    res = full
    c = res.comparisons
    fam = c[(c.model == "mixed_reml") & c.term.str.startswith("cohort[") & c.p_value.notna()]
    # reference: statsmodels multipletests(method="fdr_bh")
    np.testing.assert_allclose(fam.p_fdr, multipletests(fam.p_value, method="fdr_bh")[1])
    others = c.drop(fam.index)
    assert others.p_fdr.isna().all()


def test_reference_cohort_from_config_flips_the_sign(tables):
    few = ModelSettings(**FEW)
    a = term(run(tables, models=few), "switches_per_hour", "cohort[b]")
    b = term(run(tables, models=few, cohorts=CohortSettings(reference="b")), "switches_per_hour",
             "cohort[a]")
    assert b["estimate"] == pytest.approx(-a["estimate"], rel=1e-4)
    assert b["p_value"] == pytest.approx(a["p_value"], rel=1e-3)


def test_roster_covariates_enter_as_fixed_effects(tables):
    res = run(tables, models=ModelSettings(covariates=["birth_year", "household"],
                                           session_outcomes=["media_hours"], state_outcomes=[]))
    terms = set(res.comparisons[res.comparisons.outcome == "media_hours"].term)
    assert {"birth_year", "household[h2]"} <= terms
    gee = set(res.comparisons[res.comparisons.model == "poisson_gee"].term)
    assert {"birth_year", "household[h2]"} <= gee


def test_unknown_covariate_is_a_config_error(tables):
    with pytest.raises(ConfigError) as err:
        run(tables, models=ModelSettings(covariates=["birth_yaer"]))
    assert "birth_year" in err.value.hint


def test_unknown_methods_are_config_errors_listing_choices(tables):
    for kw, choice in (({"fdr_method": "holm"}, "bh"), ({"count_method": "glm"}, "poisson_gee"),
                       ({"df_method": "kr"}, "between_within"),
                       ({"survey_method": "t"}, "mann_whitney")):
        with pytest.raises(ConfigError) as err:
            run(tables, models=ModelSettings(**kw))
        assert choice in err.value.hint


def test_unusable_sessions_are_left_out_and_said(tables):
    s, st, g, r = tables
    s = s.copy()
    s.loc[s.session_id == "s1", "usable"] = False
    res = run((s, st, g, r), models=ModelSettings(**FEW))
    assert term(res, "switches_per_hour", "cohort[b]")["n_obs"] == 32
    assert term(res, "arousal_range", "cohort[b]")["n_obs"] == 64
    assert any("16 session(s) flagged unusable" in x for x in res.summary)
    kept = run((s, st, g, r), models=ModelSettings(**FEW), exclude_unusable=False)
    assert term(kept, "switches_per_hour", "cohort[b]")["n_obs"] == 48


def test_sessions_without_a_switch_rate_are_left_out(tables):
    s, st, g, r = tables
    s = s.copy()
    s.loc[[0, 5], "switches_per_hour"] = np.nan
    res = run((s, st, g, r), models=ModelSettings(session_outcomes=["switches_per_hour"],
                                                  state_outcomes=[]))
    assert term(res, "switches_per_hour", "cohort[b]")["n_obs"] == 46
    assert term(res, "switches", "cohort[b]", "poisson_gee")["n_obs"] == 46
    assert any("switches_per_hour: 2 row(s) without a value" in x for x in res.summary)


def test_zero_switch_sessions_use_the_stated_offset(tables):
    s, st, g, r = tables
    s = s.copy()
    s.loc[0, ["switches", "switches_per_hour"]] = [0, 0.0]
    res = run((s, st, g, r), models=ModelSettings(session_outcomes=["switches_per_hour"],
                                                  state_outcomes=[]))
    row = term(res, "switches_per_hour", "cohort[b]")
    assert np.isfinite(row["estimate"])
    assert "log((switches + 0.5) / multi_hours)" in row["note"]
    assert "zero_count_offset" in res.methods


def test_log_outcome_with_non_positive_values_is_not_fitted_and_said(tables):
    s, st, g, r = tables
    s = s.copy()
    s.loc[0, "media_hours"] = 0.0
    res = run((s, st, g, r), models=ModelSettings(
        log_outcomes=["switches_per_hour", "media_hours"], session_outcomes=["media_hours"],
        state_outcomes=[]))
    row = res.comparisons[res.comparisons.outcome == "media_hours"].iloc[0]
    assert np.isnan(row["estimate"]) and "no logarithm" in row["note"]
    assert any("media_hours" in x and "no logarithm" in x for x in res.summary)


def test_three_cohorts_each_compared_with_the_reference():
    s, st, g, r = make_tables(seed=2, cohorts=("a", "b", "c"))
    res = run((s, st, g, r), models=ModelSettings(session_outcomes=["switches_per_hour"],
                                                  state_outcomes=[]))
    terms = set(res.comparisons[res.comparisons.outcome == "switches_per_hour"].term)
    assert {"cohort[b]", "cohort[c]"} <= terms


def test_methods_name_their_references(full):
    res = full
    assert "Benjamini & Hochberg (1995)" in res.methods["fdr"]
    assert "Bates" in res.methods["mixed_model"]
    assert "Mancl & DeRouen" in res.methods["count_model"]


def test_variance_components_and_working_correlation_are_in_their_own_table(full):
    # comparisons.csv holds model terms only; variance components go to variances
    assert not full.comparisons.term.str.startswith(("var(", "corr(")).any()
    v = full.variances
    mixed = v[(v.outcome == "switches_per_hour") & (v.model == "mixed_reml")] \
        .set_index("component").estimate
    assert set(mixed.index) == {"participant_variance", "residual_variance",
                                "participant_share"}
    share = mixed["participant_variance"] / (mixed["participant_variance"]
                                             + mixed["residual_variance"])
    assert mixed["participant_share"] == pytest.approx(share)
    corr = v[(v.model == "poisson_gee")].set_index("component").estimate
    assert -1 <= corr["exchangeable_correlation"] <= 1
