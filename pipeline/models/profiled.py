"""Random-intercept linear mixed models by profiled REML, vectorised over participants.

The model is ``y = X beta + u[participant] + e`` with ``u ~ N(0, sigma_u^2)`` and
``e ~ N(0, sigma^2)``. The rows of one participant (n_g of them) then have covariance
``sigma^2 V_g`` with ``V_g = I + gamma 11'`` and ``gamma = sigma_u^2 / sigma^2``. With one
random effect per participant every quantity REML needs has a closed form per
participant, so no loop over participants and no general-purpose optimiser is needed:

* ``V_g^-1 = (I - J/n_g) + J / (n_g (1 + n_g gamma))`` with ``J = 11'``: the part of a
  row that varies within its participant is left as it is, the participant mean is
  shrunk by ``1 / (1 + n_g gamma)``. Hence ``V_g^-1/2`` maps a column ``x`` to
  ``(x - mean_g x) + lambda_g mean_g x`` with ``lambda_g = 1 / sqrt(1 + n_g gamma)``,
  and generalised least squares is ordinary least squares on the transformed rows.
* ``log|V_g| = log(1 + n_g gamma)``.
* Given gamma, beta and sigma^2 have closed forms, so the REML criterion (-2 times the
  restricted log-likelihood) is a function of gamma alone:
  ``(n-p) log(s2) + sum_g log(1 + n_g gamma) + log|X'V^-1X| + (n-p)(1 + log 2 pi)``
  with ``s2 = r'V^-1r / (n-p)``, r the GLS residual. This is the criterion lme4 reports.

The criterion is minimised over ``gamma >= 0``: a grid over many orders of magnitude
(and gamma = 0 itself, the boundary) finds the basin, Brent's method refines it on the
log scale. The covariance of the fixed effects is ``s2 (X'V^-1X)^-1``, as in lme4.

References
----------
Harville, D. A. (1977). Maximum likelihood approaches to variance component estimation
and to related problems. J Am Stat Assoc 72:320-338.
Bates, D., Mächler, M., Bolker, B. & Walker, S. (2015). Fitting linear mixed-effects
models using lme4. J Stat Softw 67(1):1-48. (the profiled REML criterion)
Brent, R. P. (1973). Algorithms for Minimization without Derivatives. Prentice-Hall.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import minimize_scalar

#: Variance ratios gamma = sigma_u^2 / sigma^2 tried before the refinement: every half
#: order of magnitude from 1e-10 (a participant share far below any zero-variance
#: threshold) to 1e8 (a residual share as far below it). gamma = 0 is tried as well.
GAMMA_GRID: np.ndarray = 10.0 ** np.arange(-10.0, 8.0 + 1e-9, 0.5)

#: Tolerance of Brent's method on log(gamma): the ratio is found to about 1e-10
#: relative, far finer than any estimate is reported.
LOG_GAMMA_TOL = 1e-10

#: OLS residuals below this share of the outcome's spread count as an exact fit.
EXACT_FIT_SHARE = 1e-10


@dataclass(frozen=True)
class GroupedData:
    """Outcome and design split into the within- and between-participant parts.

    ``codes`` gives each row's participant as 0..G-1, ``sizes`` the rows per participant;
    ``y_within``/``X_within`` are the rows minus their participant means and
    ``y_mean``/``X_mean`` the participant means (one row per participant).
    """

    codes: np.ndarray
    sizes: np.ndarray
    y_within: np.ndarray
    X_within: np.ndarray
    y_mean: np.ndarray
    X_mean: np.ndarray

    @property
    def n_obs(self) -> int:
        return len(self.codes)

    @property
    def n_fixed(self) -> int:
        return self.X_within.shape[1]


def group_data(y: np.ndarray, X: np.ndarray, groups: np.ndarray) -> GroupedData:
    """Participant means (by ``np.bincount``) and within-participant deviations."""
    codes, _ = pd.factorize(np.asarray(groups))
    sizes = np.bincount(codes).astype(float)
    y_mean = np.bincount(codes, weights=y) / sizes
    X_mean = np.column_stack([np.bincount(codes, weights=X[:, j]) for j in range(X.shape[1])])
    X_mean = X_mean / sizes[:, None]
    return GroupedData(codes, sizes, y - y_mean[codes], X - X_mean[codes], y_mean, X_mean)


@dataclass(frozen=True)
class Evaluation:
    """The REML criterion at one gamma, with the GLS quantities it was built from.

    ``R`` is the triangular factor of ``V^-1/2 X``, so ``X'V^-1X = R'R``.
    """

    gamma: float
    criterion: float
    beta: np.ndarray
    sigma2: float
    R: np.ndarray


def reml_criterion(gamma: float, data: GroupedData) -> Evaluation:
    """The REML criterion profiled over beta and sigma^2, at one variance ratio gamma.

    GLS is done as least squares on the rows transformed by ``V^-1/2`` (see the module
    docstring), through a QR decomposition, so that neither ``X'V^-1X`` nor the residual
    sum of squares is formed by subtracting large numbers.
    """
    n, p = data.n_obs, data.n_fixed
    shrink = 1.0 / np.sqrt(1.0 + data.sizes * gamma)  # lambda_g, one per participant
    Xs = data.X_within + (shrink[:, None] * data.X_mean)[data.codes]
    ys = data.y_within + (shrink * data.y_mean)[data.codes]
    Q, R = np.linalg.qr(Xs)
    beta = np.linalg.solve(R, Q.T @ ys)
    resid = ys - Xs @ beta
    sigma2 = float(resid @ resid) / (n - p)
    with np.errstate(divide="ignore"):
        criterion = ((n - p) * np.log(sigma2) + np.log1p(data.sizes * gamma).sum()
                     + 2.0 * np.log(np.abs(np.diag(R))).sum()
                     + (n - p) * (1.0 + np.log(2.0 * np.pi)))
    return Evaluation(float(gamma), float(criterion), beta, sigma2, R)


@dataclass(frozen=True)
class ProfiledFit:
    """Result of :func:`fit_random_intercept`.

    ``problem`` is None for a fit at an optimum (interior, or the boundary gamma = 0);
    otherwise it says why there is none ('exact' or 'residual_to_zero') and the
    estimates are those at the last gamma tried.
    """

    best: Evaluation
    cov_beta: np.ndarray
    problem: str | None
    evaluations: int

    @property
    def participant_variance(self) -> float:
        return self.best.gamma * self.best.sigma2


def fit_random_intercept(y: np.ndarray, X: np.ndarray, groups: np.ndarray) -> ProfiledFit:
    """REML fit of ``y ~ X + (1 | groups)``; X must have full column rank.

    Parameters
    ----------
    y : outcome, finite, one value per row.
    X : fixed-effects design (n x p), full column rank, n > p.
    groups : participant of each row.

    Returns
    -------
    ProfiledFit
        The estimates at the minimising gamma (exactly 0 when the criterion is lowest at
        the boundary), ``cov_beta = s2 (X'V^-1X)^-1``.

    References
    ----------
    Bates, D., Mächler, M., Bolker, B. & Walker, S. (2015). Fitting linear mixed-effects
    models using lme4. J Stat Softw 67(1):1-48.
    Harville, D. A. (1977). J Am Stat Assoc 72:320-338.
    """
    data = group_data(np.asarray(y, float), np.asarray(X, float), groups)
    at_zero = reml_criterion(0.0, data)
    spread = float(np.sum((y - np.mean(y)) ** 2))
    if at_zero.sigma2 * (data.n_obs - data.n_fixed) <= EXACT_FIT_SHARE ** 2 * spread:
        # the fixed effects reproduce y: every gamma gives the same beta and no residual,
        # the criterion has no minimum and no variance can be estimated
        nan = np.full((data.n_fixed, data.n_fixed), np.nan)
        return ProfiledFit(Evaluation(0.0, np.nan, at_zero.beta, 0.0, at_zero.R), nan,
                           "exact", 1)

    grid = [at_zero, *(reml_criterion(g, data) for g in GAMMA_GRID)]
    values = np.array([e.criterion for e in grid])
    k = int(np.nanargmin(values))
    best, problem, evaluations = grid[k], None, len(grid)
    if k == len(grid) - 1:
        # still falling at the largest ratio: the residual variance goes to zero
        problem = "residual_to_zero"
    elif k > 0:
        # the basin lies between the neighbouring grid points (on the log scale; the
        # first positive grid point has gamma = 0 below it, so half a step down is used)
        lo = np.log(GAMMA_GRID[k - 2]) if k >= 2 else np.log(GAMMA_GRID[0]) - np.log(10) / 2
        hi = np.log(GAMMA_GRID[k])
        found = minimize_scalar(lambda t: reml_criterion(np.exp(t), data).criterion,
                                bounds=(lo, hi), method="bounded",
                                options={"xatol": LOG_GAMMA_TOL})
        evaluations += int(found.nfev)
        refined = reml_criterion(float(np.exp(found.x)), data)
        if refined.criterion < best.criterion:
            best = refined
    R_inv = np.linalg.inv(best.R)
    return ProfiledFit(best, best.sigma2 * (R_inv @ R_inv.T), problem, evaluations)
