"""Linear mixed models fitted by REML, with honest diagnostics.

One entry point, :func:`fit_mixed`, fits every linear mixed model of the stage. The
cohort models all have a random intercept per participant; by default they are fitted
by the profiled REML fitter of :mod:`pipeline.models.profiled` (closed forms per
participant, a one-dimensional search), ``[models] mixed_fitter = "statsmodels"`` fits
them by statsmodels MixedLM instead. Models with random slopes always go to statsmodels.
The tests hold both to the published lme4 fits of the sleepstudy data, and the profiled
fitter to statsmodels on unbalanced data.

What can go wrong is reported, never hidden: a rank-deficient design is not fitted
(the collinear columns are named), a gradient optimiser that fails is followed by a
derivative-free one and the note says so, a fit with no optimum says so, a participant
variance at the boundary (zero) is flagged, and a fit that fails outright gives NaN rows
with the reason.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from pipeline.errors import choose
from pipeline.models.profiled import fit_random_intercept

#: Optimisers of the statsmodels fitter, tried in order; the first one whose fit
#: converges is kept.
OPTIMISERS: tuple[str, ...] = ("bfgs", "powell")


@dataclass
class FitResult:
    """Fixed-effect table and diagnostics of one fitted model.

    ``terms`` has one row per fixed effect: term, estimate, std_error, ci_low, ci_high,
    p_value, df. ``variances`` maps variance-component names to estimates (for the
    random intercept model: ``participant`` and ``residual``). ``fitted`` is False when
    no estimate could be produced at all.
    """

    terms: pd.DataFrame
    variances: dict[str, float]
    converged: bool
    fitted: bool
    n_obs: int
    n_groups: int
    notes: list[str] = field(default_factory=list)
    cov_re: np.ndarray | None = None
    scale: float = float("nan")
    reml_criterion: float = float("nan")
    optimiser: str | None = None


TERM_COLUMNS = ["term", "estimate", "std_error", "ci_low", "ci_high", "p_value", "df"]


# ------------------------------------------------------------ degrees of freedom
def _varies_within(X: pd.DataFrame, groups: np.ndarray) -> np.ndarray:
    """True for each column of X that takes more than one value inside some group."""
    # max - min per group (np.ptp) by pandas' built-in reductions, not a Python function
    # called once per group and column
    by = X.astype(float).groupby(groups)
    spread = by.max() - by.min()
    return (spread.to_numpy() > 1e-12).any(axis=0)


def _rank(a: np.ndarray) -> int:
    return int(np.linalg.matrix_rank(a)) if a.size else 0


def df_between_within(X: pd.DataFrame, groups: np.ndarray) -> np.ndarray:
    """Between-within degrees of freedom for each fixed effect.

    A term constant within every participant (cohort, roster covariates, the
    intercept) gets G - rank(between-participant columns) degrees of freedom, G the
    number of participants; a term that varies within participants gets
    N - G - rank(within-participant columns). For a balanced random-intercept design
    the cohort test is then exactly the two-sample t-test on participant means.

    References
    ----------
    Schluchter, M. D. & Elashoff, J. T. (1990). Small-sample adjustments to tests with
    unbalanced repeated measures assuming several covariance structures. J Stat Comput
    Simul 37:69-87. (from memory)
    """
    within = _varies_within(X, groups)
    g = len(pd.unique(groups))
    n = len(X)
    a = X.to_numpy(float)
    df_b = g - _rank(a[:, ~within])
    df_w = n - g - _rank(a[:, within])
    out = np.where(within, df_w, df_b).astype(float)
    out[out <= 0] = np.nan
    return out


def df_normal(X: pd.DataFrame, groups: np.ndarray) -> np.ndarray:
    """Infinite degrees of freedom: Wald z tests and intervals (large-sample).

    References
    ----------
    Wald, A. (1943). Tests of statistical hypotheses concerning several parameters when
    the number of observations is large. Trans Am Math Soc 54:426-482.
    """
    return np.full(X.shape[1], np.inf)


DF_METHODS: dict[str, Callable[[pd.DataFrame, np.ndarray], np.ndarray]] = {
    "between_within": df_between_within,  # Schluchter & Elashoff 1990
    "normal": df_normal,                  # Wald 1943
}

DF_REFERENCES: dict[str, str] = {
    "between_within": "between-within degrees of freedom (Schluchter & Elashoff 1990, "
    "J Stat Comput Simul 37:69-87)",
    "normal": "Wald z tests (Wald 1943, Trans Am Math Soc 54:426-482)",
}


def degrees_of_freedom(X: pd.DataFrame, groups: np.ndarray, method: str) -> np.ndarray:
    fn = choose(DF_METHODS, method, "[models] df_method")
    return fn(X, groups)


def wald_table(names: list[str], est: np.ndarray, se: np.ndarray, df: np.ndarray,
               confidence: float) -> pd.DataFrame:
    """Estimates with t (finite df) or z (infinite df) intervals and two-sided p-values."""
    est = np.asarray(est, float)
    se = np.asarray(se, float)
    df = np.asarray(df, float)
    crit = np.where(np.isinf(df), stats.norm.ppf(0.5 + confidence / 2),
                    stats.t.ppf(0.5 + confidence / 2, np.where(np.isinf(df), 1.0, df)))
    with np.errstate(invalid="ignore", divide="ignore"):
        z = est / se
        p = np.where(np.isinf(df), 2 * stats.norm.sf(np.abs(z)),
                     2 * stats.t.sf(np.abs(z), np.where(np.isinf(df), 1.0, df)))
    bad = ~np.isfinite(se) | (~np.isfinite(df) & ~np.isinf(df))
    p = np.where(bad, np.nan, p)
    lo = np.where(bad, np.nan, est - crit * se)
    hi = np.where(bad, np.nan, est + crit * se)
    return pd.DataFrame({"term": names, "estimate": est, "std_error": se, "ci_low": lo,
                         "ci_high": hi, "p_value": p, "df": df})


# ------------------------------------------------------------------- the design
def collinear_columns(X: pd.DataFrame) -> list[str]:
    """Columns of X that add nothing to the rank of the columns before them."""
    a = X.to_numpy(float)
    out, rank = [], 0
    for j, name in enumerate(X.columns):
        r = _rank(a[:, : j + 1])
        if r == rank:
            out.append(str(name))
        rank = r
    return out


def singular_design(X: pd.DataFrame, names: list[str], n_obs: int, n_groups: int
                    ) -> FitResult | None:
    """An unfitted result naming the collinear terms, or None when the design is fine."""
    bad = collinear_columns(X)
    if not bad:
        return None
    return FitResult(_empty_terms(names), {}, converged=False, fitted=False, n_obs=n_obs,
                     n_groups=n_groups,
                     notes=[("not fitted: singular design, "
                             f"{', '.join(bad)} cannot be told apart from the other terms")])


def _empty_terms(names: list[str]) -> pd.DataFrame:
    n = len(names)
    nan = np.full(n, np.nan)
    return pd.DataFrame({"term": names, "estimate": nan, "std_error": nan, "ci_low": nan,
                         "ci_high": nan, "p_value": nan, "df": nan})


def _warning_text(caught: list[warnings.WarningMessage]) -> list[str]:
    keep = []
    for w in caught:
        text = str(w.message).split("\n")[0].strip().rstrip(".")
        if text.startswith(("Retrying MixedLM", "Check mle_retvals")):
            continue
        if text and text not in keep:
            keep.append(text)
    return keep


# --------------------------------------------------------------------- the fitters
@dataclass
class Estimates:
    """What one fitter hands back to :func:`fit_mixed`.

    ``cov_fe`` is the covariance of the fixed effects, ``cov_re`` that of the random
    effects, ``scale`` the residual variance; ``notes`` are the fitter's own (optimiser
    fall-backs, convergence), in the order they are reported. ``se_note`` is said where
    some standard error is missing (None: the fitter's notes already say why).
    """

    fe: np.ndarray
    cov_fe: np.ndarray
    cov_re: np.ndarray
    scale: float
    reml_criterion: float
    converged: bool
    optimiser: str
    notes: list[str] = field(default_factory=list)
    se_note: str | None = ("standard errors could not be computed for some terms (the "
                           "curvature of the likelihood is not positive there)")


class FitFailed(Exception):
    """A fitter produced no estimates at all; the message says why."""


def fit_profiled_reml(y: np.ndarray, X: pd.DataFrame, groups: np.ndarray,
                      Z: pd.DataFrame | None) -> Estimates:
    """Random-intercept model by REML profiled over the fixed effects and the residual
    variance, minimised over the variance ratio (:mod:`pipeline.models.profiled`).

    Vectorised over participants and one-dimensional, so a fit takes milliseconds; the
    fixed-effect covariance is ``sigma^2 (X'V^-1X)^-1`` as lme4 reports it.

    References
    ----------
    Bates, D., Mächler, M., Bolker, B. & Walker, S. (2015). Fitting linear mixed-effects
    models using lme4. J Stat Softw 67(1):1-48.
    Harville, D. A. (1977). Maximum likelihood approaches to variance component
    estimation and to related problems. J Am Stat Assoc 72:320-338.
    """
    if Z is not None:
        raise ValueError("the profiled fitter handles a random intercept only")
    a = X.to_numpy(float)
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(a))):
        raise FitFailed("the outcome or the design has missing or infinite values")
    fit = fit_random_intercept(y, a, groups)
    best, notes, se_note = fit.best, [], Estimates.se_note
    if fit.problem == "exact":
        notes.append("did not converge (the fixed effects reproduce the outcome exactly, so "
                     "no residual or participant variance is left to estimate): estimates "
                     "are the least-squares values, without standard errors, and not to be "
                     "trusted")
        se_note = None
    elif fit.problem == "residual_to_zero":
        notes.append("did not converge (the REML criterion keeps falling as the residual "
                     "variance shrinks to zero): estimates are the last values tried and "
                     "not to be trusted")
    return Estimates(fe=best.beta, cov_fe=fit.cov_beta,
                     cov_re=np.array([[fit.participant_variance]]), scale=best.sigma2,
                     reml_criterion=best.criterion, converged=fit.problem is None,
                     optimiser="brent", notes=notes, se_note=se_note)


def fit_statsmodels(y: np.ndarray, X: pd.DataFrame, groups: np.ndarray,
                    Z: pd.DataFrame | None) -> Estimates:
    """Any random-effects design by statsmodels MixedLM (REML): BFGS, then Powell's
    derivative-free method where BFGS does not converge (:data:`OPTIMISERS`).

    The fixed-effect covariance is the inverse of the full observed Hessian, fixed and
    variance parameters together; in unbalanced designs it differs slightly from lme4's.

    References
    ----------
    Lindstrom, M. J. & Bates, D. M. (1988). Newton-Raphson and EM algorithms for linear
    mixed-effects models for repeated-measures data. J Am Stat Assoc 83:1014-1022.
    Powell, M. J. D. (1964). An efficient method for finding the minimum of a function
    of several variables without calculating derivatives. Comput J 7:155-162.
    """
    from statsmodels.regression.mixed_linear_model import MixedLM

    notes: list[str] = []
    failures: list[str] = []
    result, used = None, None
    for opt in OPTIMISERS:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                model = MixedLM(y, X.astype(float), groups=groups, exog_re=Z)
                res = model.fit(reml=True, method=[opt])
            except (np.linalg.LinAlgError, ValueError, FloatingPointError) as err:
                failures.append(f"{opt} optimiser failed ({err})")
                continue
        texts = _warning_text(caught)
        if res.converged and np.all(np.isfinite(np.asarray(res.fe_params, float))):
            result, used = res, opt
            notes.extend(t for t in texts if "boundary" not in t and "converge" not in t
                         and "optimizer" not in t and "Gradient" not in t)
            break
        failures.append(f"{opt} optimiser did not converge")
        result, used = res, opt  # keep the last attempt in case none converges

    if result is None:
        raise FitFailed("; ".join(failures))

    converged = bool(result.converged)
    if failures and converged:
        notes.insert(0, f"converged with the {used} optimiser after: " + "; ".join(failures))
    elif not converged:
        notes.insert(0, "did not converge (" + "; ".join(failures) + "): estimates are "
                     "the optimiser's last values and not to be trusted")

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = np.asarray(result.fe_params, float)
        k = len(est)
        cov_fe = np.asarray(result.cov_params(), float)[:k, :k]
        reml = float(-2 * result.llf)
    return Estimates(fe=est, cov_fe=cov_fe, cov_re=np.atleast_2d(np.asarray(result.cov_re,
                                                                            float)),
                     scale=float(result.scale), reml_criterion=reml, converged=converged,
                     optimiser=str(used), notes=notes)


#: How a random-intercept model is fitted ([models] mixed_fitter). A model with random
#: slopes (``Z`` given) always goes to statsmodels, the general path.
MIXED_FITTERS: dict[str, Callable[..., Estimates]] = {
    "profiled_reml": fit_profiled_reml,  # Bates et al. 2015; Harville 1977
    "statsmodels": fit_statsmodels,      # statsmodels MixedLM (Lindstrom & Bates 1988)
}

#: Method sentence of each fitter, for the methods section of the report.
MIXED_FITTER_REFERENCES: dict[str, str] = {
    "profiled_reml": "REML criterion profiled over the fixed effects and the residual "
    "variance and minimised over the ratio of participant to residual variance (a grid "
    "refined by Brent's method, Brent 1973, Algorithms for Minimization without "
    "Derivatives), computed from per-participant sums (Harville 1977, J Am Stat Assoc "
    "72:320-338; Bates et al. 2015, J Stat Softw 67(1)); fixed-effect standard errors "
    "from sigma^2 (X'V^-1X)^-1 as in lme4; checked against the lme4 fit of the sleepstudy "
    "data and against statsmodels MixedLM",
    "statsmodels": "statsmodels MixedLM (Lindstrom & Bates 1988, J Am Stat Assoc "
    "83:1014-1022), BFGS with Powell's method as the fall-back; checked against the lme4 "
    "fit of the sleepstudy data in Bates et al. 2015, J Stat Softw 67(1)",
}


# ------------------------------------------------------------------------ the fit
def fit_mixed(
    y: pd.Series | np.ndarray,
    X: pd.DataFrame,
    groups: pd.Series | np.ndarray,
    Z: pd.DataFrame | None = None,
    *,
    confidence: float = 0.95,
    df_method: str = "between_within",
    zero_variance_share: float = 1e-4,
    fitter: str = "profiled_reml",
) -> FitResult:
    """Fit a linear mixed model by restricted maximum likelihood.

    Parameters
    ----------
    y : outcome, one value per row.
    X : fixed-effects design, named columns (the names become the term names).
    groups : grouping factor of the random effects (the participant).
    Z : random-effects design (default: a random intercept). With Z given the model is
        fitted by statsmodels whatever ``fitter`` says.
    confidence : coverage of the intervals.
    df_method : key of :data:`DF_METHODS`.
    zero_variance_share : a first random-effect variance below this share of
        (that variance + residual variance) is reported as at zero.
    fitter : key of :data:`MIXED_FITTERS`, how a random-intercept model is fitted.

    References
    ----------
    Laird, N. M. & Ware, J. H. (1982). Random-effects models for longitudinal data.
    Biometrics 38:963-974.
    Bates, D., Mächler, M., Bolker, B. & Walker, S. (2015). Fitting linear mixed-effects
    models using lme4. J Stat Softw 67(1):1-48. (REML fit reproduced by the tests.)
    """
    fit_fn = choose(MIXED_FITTERS, fitter, "[models] mixed_fitter")
    if Z is not None:
        fit_fn = fit_statsmodels
    y = np.asarray(y, dtype=float)
    groups = np.asarray(groups)
    names = [str(c) for c in X.columns]
    n_obs, n_groups = len(y), len(pd.unique(groups))
    df = degrees_of_freedom(X, groups, df_method)

    singular = singular_design(X, names, n_obs, n_groups)
    if singular is not None:
        return singular
    if n_groups < 2 or n_obs <= X.shape[1]:
        return FitResult(_empty_terms(names), {}, converged=False, fitted=False, n_obs=n_obs,
                         n_groups=n_groups,
                         notes=[(f"not fitted: {n_obs} rows in {n_groups} participant(s) are "
                                 f"too few for {X.shape[1]} fixed effects")])

    if np.nanmax(y) - np.nanmin(y) <= 1e-12 * max(1.0, float(np.nanmax(np.abs(y)))):
        return FitResult(_empty_terms(names), {}, converged=False, fitted=False, n_obs=n_obs,
                         n_groups=n_groups,
                         notes=["not fitted: every value of the outcome is the same"])

    try:
        fit = fit_fn(y, X, groups, Z)
    except FitFailed as err:
        return FitResult(_empty_terms(names), {}, converged=False, fitted=False, n_obs=n_obs,
                         n_groups=n_groups, notes=[f"fit failed: {err}"])

    notes = list(fit.notes)
    var_fe = np.diag(fit.cov_fe)
    with np.errstate(invalid="ignore"):
        se = np.where(var_fe > 0, np.sqrt(np.clip(var_fe, 0, None)), np.nan)
    if not np.all(np.isfinite(se)) and fit.se_note:
        notes.append(fit.se_note)
    terms = wald_table(names, fit.fe, se, df, confidence)

    cov_re, scale = fit.cov_re, fit.scale
    variances = {"residual": scale}
    re_names = ["participant"] if Z is None else [f"participant:{c}" for c in Z.columns]
    for i, nm in enumerate(re_names):
        variances[nm] = float(cov_re[i, i])
    first = float(cov_re[0, 0])
    total = first + scale
    if total > 0 and first / total < zero_variance_share:
        notes.append("participant variance at zero (boundary fit): sessions of one "
                     "participant are no more alike than sessions of different participants "
                     "here, so the model reduces to one that treats sessions as independent")
    if total > 0 and scale / total < zero_variance_share:
        notes.append("residual variance at zero (singular fit): the rows of each participant "
                     "have (almost) the same value")
    return FitResult(terms, variances, converged=fit.converged, fitted=True, n_obs=n_obs,
                     n_groups=n_groups, notes=notes, cov_re=cov_re, scale=scale,
                     reml_criterion=fit.reml_criterion, optimiser=fit.optimiser)
