"""The GEE count model (the check on the mixed model) and the disagreement rule."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from pipeline.models.counts import fit_negbin_gee, fit_poisson_gee
from pipeline.models.summary import disagreement


def test_poisson_gee_with_one_session_per_participant_is_the_closed_form_rate_ratio():
    # With clusters of size one the working correlation plays no part and the Poisson
    # score equations with a log offset give the ratio of pooled rates:
    # (sum y_b / sum t_b) / (sum y_a / sum t_a) (e.g. Cameron & Trivedi 2013, ch. 3).
    rng = np.random.default_rng(4)
    n = 30
    cohort = np.r_[np.zeros(n), np.ones(n)]
    hours = rng.uniform(0.5, 2.0, 2 * n)
    y = rng.poisson(50 * hours * np.where(cohort == 1, 1.6, 1.0))
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": cohort})
    fit = fit_poisson_gee(y, hours, X, np.arange(2 * n), cov_type="robust", df_method="normal")
    est = fit.terms.set_index("term").loc["cohort[b]", "estimate"]
    b, a = cohort == 1, cohort == 0
    assert est == pytest.approx(np.log((y[b].sum() / hours[b].sum())
                                       / (y[a].sum() / hours[a].sum())), rel=1e-6)
    # reference library: the robust (sandwich) SE equals that of a Poisson GLM with HC0
    glm = sm.GLM(y, X, family=sm.families.Poisson(), offset=np.log(hours)).fit(cov_type="HC0")
    se = fit.terms.set_index("term").loc["cohort[b]", "std_error"]
    assert se == pytest.approx(glm.bse["cohort[b]"], rel=1e-4)


def test_negbin_moment_estimate_recovers_the_dispersion():
    # NB2: Var = mu + alpha mu^2; moment estimator (Cameron & Trivedi 2013, sec. 3.2)
    rng = np.random.default_rng(8)
    n, alpha, mu = 3000, 0.3, 40.0
    y = rng.negative_binomial(1 / alpha, 1 / (1 + alpha * mu), n)
    X = pd.DataFrame({"Intercept": np.ones(n)})
    fit = fit_negbin_gee(y, np.ones(n), X, np.arange(n))
    got = float(fit.notes[0].split("alpha = ")[1].split(" ")[0])
    assert got == pytest.approx(alpha, rel=0.1)
    assert fit.terms.estimate.iloc[0] == pytest.approx(np.log(mu), abs=0.03)


def test_bias_reduced_covariance_is_larger_with_few_participants():
    # Mancl & DeRouen (2001): the bias-corrected sandwich inflates the too-small robust
    # variance of GEE with few clusters
    rng = np.random.default_rng(2)
    g = np.repeat(np.arange(8), 3)
    cohort = (g >= 4).astype(float)
    hours = np.ones(24)
    y = rng.poisson(np.exp(3 + 0.3 * cohort + rng.normal(0, 0.3, 8)[g]))
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": cohort})
    robust = fit_poisson_gee(y, hours, X, g, cov_type="robust").terms.std_error.iloc[1]
    reduced = fit_poisson_gee(y, hours, X, g, cov_type="bias_reduced").terms.std_error.iloc[1]
    assert reduced > robust


def row(est, p):
    return pd.Series({"estimate": est, "p_value": p})


def test_disagreement_rule():
    assert disagreement(row(0.3, 0.01), row(0.25, 0.02), 0.05) is None
    assert disagreement(row(0.3, 0.30), row(0.25, 0.40), 0.05) is None
    assert "only the mixed model" in disagreement(row(0.3, 0.01), row(0.2, 0.2), 0.05)
    assert "only the count model" in disagreement(row(0.3, 0.2), row(0.2, 0.01), 0.05)
    assert "opposite directions" in disagreement(row(0.3, 0.01), row(-0.2, 0.01), 0.05)
    assert disagreement(row(0.3, np.nan), row(0.2, 0.01), 0.05) is None
