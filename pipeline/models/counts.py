"""Switch counts through a marginal count model: the check on the mixed model.

Generalised estimating equations with a log link, a log(multi_hours) offset (so the
cohort term is a rate ratio of switches per multi-platform hour) and an exchangeable
working correlation within participant; sandwich standard errors, by default with
the small-sample bias correction for few participants.
"""

from __future__ import annotations

import warnings
from typing import Callable

import numpy as np
import pandas as pd

from pipeline.errors import choose
from pipeline.models.mixed import FitResult, _empty_terms, singular_design, \
    degrees_of_freedom, wald_table

CountMethod = Callable[..., FitResult]


def _fit_gee(counts: np.ndarray, exposure_hours: np.ndarray, X: pd.DataFrame,
             groups: np.ndarray, family, *, cov_type: str, confidence: float,
             df_method: str, notes: list[str]) -> FitResult:
    # the GEE modules themselves: ``statsmodels.api`` would import all of statsmodels
    # (about 0.8 s, measured), which a run pays in full at its group stage
    from statsmodels.genmod.cov_struct import Exchangeable
    from statsmodels.genmod.generalized_estimating_equations import GEE

    names = [str(c) for c in X.columns]
    n_obs, n_groups = len(counts), int(len(pd.unique(groups)))
    singular = singular_design(X, names, n_obs, n_groups)
    if singular is not None:
        return singular
    df = degrees_of_freedom(X, groups, df_method)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            model = GEE(counts, X.astype(float), groups=groups,
                        offset=np.log(exposure_hours), family=family,
                        cov_struct=Exchangeable())
            res = model.fit(cov_type=cov_type)
        except (np.linalg.LinAlgError, ValueError, FloatingPointError) as err:
            return FitResult(_empty_terms(names), {}, converged=False, fitted=False,
                             n_obs=n_obs, n_groups=n_groups, notes=[f"fit failed: {err}"])
    texts = []
    for w in caught:
        t = str(w.message).split("\n")[0].strip()
        if t and t not in texts:
            texts.append(t)
    converged = bool(getattr(res, "converged", True)) and not any(
        "iteration limit" in t.lower() for t in texts)
    notes = list(notes)
    if not converged:
        notes.append("did not converge: " + "; ".join(texts or ["iteration limit"]))
    est = np.asarray(res.params, float)
    se = np.asarray(res.bse, float)
    terms = wald_table(names, est, se, df, confidence)
    rho = float(np.asarray(model.cov_struct.dep_params).ravel()[0])
    return FitResult(terms, {"exchangeable_correlation": rho}, converged=converged,
                     fitted=True, n_obs=n_obs, n_groups=n_groups, notes=notes)


def fit_poisson_gee(counts, exposure_hours, X, groups, *, cov_type="bias_reduced",
                    confidence=0.95, df_method="between_within") -> FitResult:
    """Poisson GEE, log link, log(exposure) offset, exchangeable within participant.

    The sandwich covariance keeps the standard errors valid under overdispersion.

    References
    ----------
    Liang, K.-Y. & Zeger, S. L. (1986). Longitudinal data analysis using generalized
    linear models. Biometrika 73:13-22.
    Zeger, S. L. & Liang, K.-Y. (1986). Longitudinal data analysis for discrete and
    continuous outcomes. Biometrics 42:121-130.
    Mancl, L. A. & DeRouen, T. A. (2001). A covariance estimator for GEE with improved
    small-sample properties. Biometrics 57:126-134. (cov_type "bias_reduced")
    """
    from statsmodels.genmod.families import Poisson

    return _fit_gee(np.asarray(counts, float), np.asarray(exposure_hours, float), X,
                    np.asarray(groups), Poisson(), cov_type=cov_type,
                    confidence=confidence, df_method=df_method, notes=[])


def fit_negbin_gee(counts, exposure_hours, X, groups, *, cov_type="bias_reduced",
                   confidence=0.95, df_method="between_within") -> FitResult:
    """Negative-binomial (NB2) GEE; the dispersion alpha by the method of moments.

    alpha is estimated from a Poisson GEE fit as
    sum(((y - mu)^2 - mu) / mu^2) / (n - p), floored at 1e-8, then the model is refit
    with that variance function Var = mu + alpha mu^2.

    References
    ----------
    Cameron, A. C. & Trivedi, P. K. (2013). Regression Analysis of Count Data, 2nd ed.
    Cambridge University Press, section 3.2 (moment estimator of alpha).
    Liang, K.-Y. & Zeger, S. L. (1986). Biometrika 73:13-22.
    Mancl, L. A. & DeRouen, T. A. (2001). Biometrics 57:126-134.
    """
    from statsmodels.genmod.families import NegativeBinomial

    y = np.asarray(counts, float)
    exposure = np.asarray(exposure_hours, float)
    first = fit_poisson_gee(y, exposure, X, groups, cov_type=cov_type,
                            confidence=confidence, df_method=df_method)
    if not first.fitted:
        return first
    beta = first.terms["estimate"].to_numpy()
    mu = np.exp(X.to_numpy(float) @ beta + np.log(exposure))
    dof = max(len(y) - X.shape[1], 1)
    alpha = max(float(np.sum(((y - mu) ** 2 - mu) / mu ** 2) / dof), 1e-8)
    return _fit_gee(y, exposure, X, np.asarray(groups),
                    NegativeBinomial(alpha=alpha), cov_type=cov_type,
                    confidence=confidence, df_method=df_method,
                    notes=[f"dispersion alpha = {alpha:.3g} (method of moments)"])


COUNT_METHODS: dict[str, CountMethod] = {
    "poisson_gee": fit_poisson_gee,  # Liang & Zeger 1986
    "negbin_gee": fit_negbin_gee,    # Cameron & Trivedi 2013; Liang & Zeger 1986
}

COUNT_REFERENCES: dict[str, str] = {
    "poisson_gee": "Poisson generalised estimating equations with a log(multi_hours) "
    "offset and exchangeable working correlation (Liang & Zeger 1986, Biometrika "
    "73:13-22)",
    "negbin_gee": "negative-binomial generalised estimating equations with a "
    "log(multi_hours) offset and exchangeable working correlation (Liang & Zeger 1986, "
    "Biometrika 73:13-22; dispersion by moments, Cameron & Trivedi 2013)",
    "bias_reduced": "bias-reduced sandwich covariance (Mancl & DeRouen 2001, Biometrics "
    "57:126-134)",
    "robust": "sandwich covariance (Liang & Zeger 1986)",
}


def count_method(name: str) -> CountMethod:
    return choose(COUNT_METHODS, name, "[models] count_method")
