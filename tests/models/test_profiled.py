"""The profiled REML fitter of random-intercept models against statsmodels MixedLM, OLS
and the dense textbook formula."""

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from models_tables import make_tables
from statsmodels.regression.mixed_linear_model import MixedLM

from pipeline.config import CohortSettings, ModelSettings
from pipeline.errors import ConfigError
from pipeline.models import compare
from pipeline.models.mixed import fit_mixed
from pipeline.models.profiled import group_data, reml_criterion


def unbalanced(seed: int, participant_sd: float, n_groups: int = 40):
    """Between- and within-participant terms, 1 to 7 rows per participant."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 8, n_groups)
    g = np.repeat(np.arange(n_groups), sizes)
    n = len(g)
    cohort = (np.arange(n_groups) % 2)[g].astype(float)
    x = rng.normal(size=n) + rng.normal(size=n_groups)[g]
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": cohort, "x": x, "cohort[b]:x": cohort * x})
    y = (X.to_numpy() @ [1.0, 0.5, 0.3, -0.2] + rng.normal(0, participant_sd, n_groups)[g]
         + rng.normal(0, 1.0, n))
    return y, X, np.array([f"p{i:02d}" for i in g])


def statsmodels_reference(y, X, groups):
    """statsmodels MixedLM REML fit (tight gradient tolerance) and sigma^2 (X'V^-1X)^-1.

    statsmodels' own ``bse_fe`` inverts the full observed Hessian (fixed effects and
    variance together); lme4, and the profiled fitter, report the covariance given the
    variances, sigma^2 (X'V^-1X)^-1, which is minus the inverse of the fixed-effect block
    of statsmodels' Hessian. The two agree in balanced designs only.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = MixedLM(y, X, groups=groups)
        res = model.fit(reml=True, method="bfgs", gtol=1e-10, maxiter=1000)
        p = X.shape[1]
        cov = -np.linalg.inv(model.hessian(res.params_object)[0][:p, :p])
    return res, np.sqrt(np.diag(cov))


@pytest.mark.parametrize("seed,participant_sd", [(1, 1.0), (2, 0.5), (3, 2.0), (4, 0.3),
                                                 (5, 1.5), (100, 0.0), (101, 0.0)])
def test_profiled_fit_agrees_with_statsmodels_mixedlm(seed, participant_sd):
    # reference library: statsmodels MixedLM (REML). Seeds 100 and 101 have no
    # participant effect and their REML estimate lies on the boundary (zero).
    y, X, g = unbalanced(seed, participant_sd)
    fit = fit_mixed(y, X, g)
    ref, ref_se = statsmodels_reference(y, X, g)
    t = fit.terms
    assert fit.converged and fit.optimiser == "brent"
    ref_var = float(np.asarray(ref.cov_re)[0, 0])
    total = ref_var + ref.scale
    # the estimates to 1e-5 of their standard error, the rest to 1e-5 relative
    assert np.abs(t["estimate"] - ref.fe_params.to_numpy()).max() <= 1e-5 * t["std_error"].min()
    assert t["std_error"].to_numpy() == pytest.approx(ref_se, rel=1e-5)
    assert fit.scale == pytest.approx(ref.scale, rel=1e-5)
    assert fit.variances["participant"] == pytest.approx(ref_var, abs=1e-5 * total)
    assert fit.reml_criterion == pytest.approx(-2 * ref.llf, rel=1e-5)
    # never worse than the reference optimiser
    assert fit.reml_criterion <= -2 * ref.llf + 1e-9 * abs(ref.llf)
    if participant_sd == 0:
        assert fit.variances["participant"] == 0.0
        assert any("participant variance at zero" in n for n in fit.notes)
    else:
        assert fit.variances["participant"] > 0 and not fit.notes


def test_boundary_fit_is_the_ordinary_least_squares_fit():
    # at zero participant variance V = I: REML is least squares with the unbiased residual
    # variance (reference library: statsmodels OLS)
    y, X, g = unbalanced(100, 0.0)
    fit = fit_mixed(y, X, g)
    ols = sm.OLS(y, X).fit()
    assert fit.variances["participant"] == 0.0
    t = fit.terms
    assert t["estimate"].to_numpy() == pytest.approx(ols.params.to_numpy(), rel=1e-10)
    assert t["std_error"].to_numpy() == pytest.approx(ols.bse.to_numpy(), rel=1e-10)
    assert fit.scale == pytest.approx(ols.scale, rel=1e-10)


@pytest.mark.parametrize("gamma", [0.0, 0.01, 0.7, 30.0])
def test_vectorised_criterion_equals_the_dense_formula(gamma):
    # Harville (1977): -2 restricted log-likelihood with V = I + gamma ZZ' formed densely,
    # GLS by explicit inverse, sigma^2 profiled out
    y, X, g = unbalanced(7, 1.0, n_groups=12)
    a = X.to_numpy()
    n, p = a.shape
    Z = (g[:, None] == np.unique(g)[None, :]).astype(float)
    V = np.eye(n) + gamma * Z @ Z.T
    Vi = np.linalg.inv(V)
    A = a.T @ Vi @ a
    beta = np.linalg.solve(A, a.T @ Vi @ y)
    r = y - a @ beta
    s2 = r @ Vi @ r / (n - p)
    dense = ((n - p) * np.log(s2) + np.linalg.slogdet(V)[1] + np.linalg.slogdet(A)[1]
             + (n - p) * (1 + np.log(2 * np.pi)))
    e = reml_criterion(gamma, group_data(y, a, g))
    assert e.criterion == pytest.approx(dense, rel=1e-12)
    assert e.beta == pytest.approx(beta, rel=1e-10)
    assert e.sigma2 == pytest.approx(s2, rel=1e-10)
    assert np.linalg.inv(e.R.T @ e.R) == pytest.approx(np.linalg.inv(A), rel=1e-9)


def test_no_residual_variance_within_participants_is_flagged_not_converged():
    # each participant's rows are identical: the criterion falls without end as the
    # residual variance goes to zero, so there is no optimum to report
    rng = np.random.default_rng(5)
    g = np.repeat(np.arange(10), 3)
    cohort = (g >= 5).astype(float)
    y = (1.0 + 0.5 * cohort + rng.normal(0, 1, 10)[g])
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": cohort})
    fit = fit_mixed(y, X, g)
    assert fit.fitted and not fit.converged
    assert "did not converge" in fit.notes[0]
    assert any("residual variance at zero" in n for n in fit.notes)


def test_unknown_fitter_names_the_choices():
    y, X, g = unbalanced(1, 1.0, n_groups=8)
    with pytest.raises(ConfigError) as err:
        fit_mixed(y, X, g, fitter="lme4")
    assert "profiled_reml" in err.value.hint and "statsmodels" in err.value.hint
    with pytest.raises(ConfigError):
        compare(*make_tables(), ModelSettings(mixed_fitter="lme4"), CohortSettings())


def test_fitter_setting_chooses_the_fitter_and_its_methods_text():
    tables = make_tables(seed=4)
    one = {"session_outcomes": ["switches_per_hour", "media_hours"], "state_outcomes": []}
    fast = compare(*tables, ModelSettings(**one), CohortSettings())
    slow = compare(*tables, ModelSettings(mixed_fitter="statsmodels", **one), CohortSettings())
    assert "profiled over the fixed effects" in fast.methods["mixed_model"]
    assert "statsmodels MixedLM (Lindstrom & Bates 1988" in slow.methods["mixed_model"]
    # balanced design: the two fitters give the same model to optimiser tolerance
    a = fast.comparisons[fast.comparisons.model == "mixed_reml"]
    b = slow.comparisons[slow.comparisons.model == "mixed_reml"]
    assert a["estimate"].to_numpy() == pytest.approx(b["estimate"].to_numpy(), rel=1e-4)
    assert a["std_error"].to_numpy() == pytest.approx(b["std_error"].to_numpy(), rel=1e-3)
