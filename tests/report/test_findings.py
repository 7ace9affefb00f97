"""Headline findings read from comparisons.csv: terms, ratios, wording, rounding."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from pipeline.report import findings as F
from pipeline.report import numbers as fmt


def _row(**kw):
    base = {"outcome": "switches_per_hour", "model": "mixed", "term": "cohort[T.teen]",
            "estimate": math.log(1.5), "std_error": 0.1, "ci_low": math.log(1.2),
            "ci_high": math.log(1.9), "p_value": 0.004, "p_fdr": 0.012, "n_participants": 20,
            "n_obs": 80, "scale": "log", "converged": True, "note": ""}
    base.update(kw)
    return base


@pytest.mark.parametrize("term, parts", [
    ("cohort[T.teen]", [("cohort", "teen")]),
    ("C(cohort)[T.teen]", [("cohort", "teen")]),
    ("C(cohort, Treatment('adult'))[T.teen]", [("cohort", "teen")]),
    ("cohort=teen", [("cohort", "teen")]),
    ("state[T.multi]:cohort[T.teen]", [("state", "multi"), ("cohort", "teen")]),
    ("birth_year", [("birth_year", None)]),
])
def test_term_parts_read_treatment_coding(term, parts):
    # patsy's treatment-coding names, e.g. "C(x)[T.b]" (patsy documentation, common practice)
    assert F.term_parts(term) == parts


def test_log_scale_rows_are_shown_as_ratios_and_intercepts_are_dropped():
    comp = pd.DataFrame([_row(term="Intercept"), _row()])
    (e,) = F.effects(comp)
    # exp of a log rate difference is the rate ratio (Cameron & Trivedi, "Regression
    # Analysis of Count Data"; common practice)
    assert e.shown == pytest.approx(1.5) and e.shown_low == pytest.approx(1.2)
    assert e.claim("adult") == \
        "Switches per multi-platform hour: teen vs adult, rate ratio 1.50"
    assert e.statistics().startswith("95% CI 1.20–1.90; p = 0.004; FDR-adjusted p = 0.012")
    assert e.significant(0.05) and not e.significant(0.01)


def test_identity_rows_are_differences_and_negative_bounds_read_clearly():
    comp = pd.DataFrame([_row(outcome="arousal_range", term="state[T.multi]", estimate=-0.21,
                              ci_low=-0.37, ci_high=-0.05, scale="identity",
                              converged=False, note="boundary fit")])
    (e,) = F.effects(comp)
    assert e.number() == "difference -0.21 z"  # arousal is a z-score
    assert "95% CI -0.37 to -0.05" in e.statistics()
    s = e.sentence("adult", 0.05)
    assert "did not converge" in s and "boundary fit" in s


def test_primary_effect_is_the_switch_rate_cohort_term_with_smallest_p():
    comp = pd.DataFrame([_row(term="cohort[T.kids]", p_value=0.3, p_fdr=0.3), _row(),
                         _row(outcome="compression_ratio", p_value=1e-6, p_fdr=1e-6,
                              scale="identity")])
    effs = F.effects(comp)
    assert F.primary_effect(effs).term == "cohort[T.teen]"
    assert [e.outcome for e in F.ranked(effs)][:2] == ["switches_per_hour"] * 2
    assert F.strongest(effs).outcome == "compression_ratio"


@pytest.mark.parametrize("value, text", [(0.0004, "p < 0.001"), (0.0123, "p = 0.012"),
                                         (float("nan"), "p n/a")])
def test_p_values(value, text):
    assert fmt.p_value(value) == text


def test_number_formats():
    assert fmt.num(1.4049) == "1.40" and fmt.num(0.004) == "0.004"
    assert fmt.short(2.0) == "2" and fmt.short(12.34) == "12.3"
    assert fmt.pct(0.6449) == "64%" and fmt.auto(2447.2) == "2447"
    assert fmt.interval(1.1, 1.83) == "1.10–1.83"


def test_models_stage_layout_cohort_by_state_with_variance_rows():
    # the models stage writes treatment terms as "cohort[b]" and "cohort[b]:state[multi]"
    # (outcome ~ cohort * state, reference state single), variance components as rows
    # with scale "variance", and p_fdr only for the tested terms
    comp = pd.DataFrame([
        _row(outcome="arousal_range", term="Intercept", scale="identity", estimate=3.3),
        _row(outcome="arousal_range", term="cohort[late]", scale="identity", estimate=-0.41,
             ci_low=-0.77, ci_high=-0.06, p_fdr=0.054),
        _row(outcome="arousal_range", term="state[multi]", scale="identity", estimate=-1.17,
             ci_low=-1.46, ci_high=-0.89, p_value=1e-11, p_fdr=float("nan")),
        _row(outcome="arousal_range", term="cohort[late]:state[multi]", scale="identity",
             estimate=0.755, ci_low=0.35, ci_high=1.16, p_value=4e-4, p_fdr=0.0035),
        _row(outcome="arousal_range", term="var(participant)", scale="variance", estimate=0.01),
        _row(outcome="multi_share", term="cohort[late]", scale="identity", estimate=-0.122,
             ci_low=-0.226, ci_high=-0.018),
    ])
    effs = F.effects(comp)
    assert [e.term for e in effs] == ["cohort[late]", "state[multi]",
                                      "cohort[late]:state[multi]", "cohort[late]"]
    cohort, state, inter, share = effs
    assert cohort.term_label("early") == "late vs early in single"
    assert state.term_label("early") == "multi vs single in early"
    assert inter.term_label("early") == "multi − single difference, late vs early"
    assert inter.number() == "difference 0.76 z" and inter.significant(0.05)
    assert not state.in_fdr_family and not state.significant(0.05)
    assert "not part of the false-discovery-rate family" in state.evidence(0.05)
    assert share.number() == "difference -12.20 percentage points"
    assert F.strongest(effs) is inter  # the tested family comes first
    assert F.outcome_label("dwell_median_s[screen]") == "median dwell time, screen"
