"""Tonic/phasic decomposition by convex optimisation (Greco et al. 2016), windowed.

The model: skin conductance y = r + t + noise, where the phasic component r is a
sparse, non-negative sudomotor driver p filtered by the Bateman impulse response
(discretised as an ARMA filter: p = A q, r = M q), and the tonic component t is a
cubic spline with knots every ``knot_s`` seconds plus an offset and a linear trend
(t = B l + C d). The estimate solves the quadratic programme

    minimise 1/2 ||M q + B l + C d - y||^2 + alpha * sum(A q) + gamma/2 ||l||^2
    subject to A q >= 0

exactly as in the paper. It is solved here by a primal-dual interior-point method
(Mehrotra predictor-corrector) whose Newton systems are banded in q (M and A have
three diagonals) and small and dense in (l, d), so one window costs O(n) memory and
about O(n * knots) time per iteration. Long recordings are cut into windows of
``window_s`` with ``overlap_s`` of context on each side that is solved and dropped,
so a 10-hour recording never needs more than one window's matrices in memory.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import BSpline
from scipy.linalg import cho_factor, cho_solve, cho_solve_banded, cholesky_banded

from pipeline.config import ConvexSettings
from pipeline.errors import StageError

#: Interior-point stopping tolerances: relative dual and primal residuals, and the
#: duality gap (which bounds how far the objective is from its optimum) relative to
#: ||y||^2. The dual residual cannot fall much below 1e-7 once the Newton systems grow
#: ill-conditioned near the optimum, hence its looser limit.
DUAL_TOLERANCE = 1e-5
TOLERANCE = 1e-7
GAP_TOLERANCE = 1e-9


def bateman_arma(fs: float, tau_rise_s: float, tau_decay_s: float
                 ) -> tuple[np.ndarray, np.ndarray]:
    """MA and AR coefficients of the Bateman impulse response, bilinear transform.

    The continuous response exp(-t / tau_decay) - exp(-t / tau_rise) has transfer
    function (a1 - a0) / ((s + a0)(s + a1)); the bilinear transform at step 1/fs gives
    the coefficients below (Greco et al. 2016, eq. 6), so that ``lfilter(ma, ar, p)``
    of a driver density p is the phasic response.
    """
    delta = 1.0 / fs
    a1 = 1.0 / min(tau_rise_s, tau_decay_s)
    a0 = 1.0 / max(tau_rise_s, tau_decay_s)
    ar = np.array([(a1 * delta + 2.0) * (a0 * delta + 2.0),
                   2.0 * a1 * a0 * delta**2 - 8.0,
                   (a1 * delta - 2.0) * (a0 * delta - 2.0)]) / ((a1 - a0) * delta**2)
    ma = np.array([1.0, 2.0, 1.0])
    return ma, ar


def _apply(c: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Rows 2..n-1 of the three-tap operator: c0 q[i] + c1 q[i-1] + c2 q[i-2]."""
    return c[0] * q[2:] + c[1] * q[1:-1] + c[2] * q[:-2]


def _apply_t(c: np.ndarray, v: np.ndarray, n: int) -> np.ndarray:
    """Transpose of :func:`_apply` (v has n - 2 rows; works on 2-D v column-wise)."""
    out = np.zeros((n,) + v.shape[1:])
    out[2:] += c[0] * v
    out[1:-1] += c[1] * v
    out[:-2] += c[2] * v
    return out


def _gram_bands(c: np.ndarray, w: np.ndarray, n: int) -> np.ndarray:
    """Upper banded form (3, n) of O^T diag(w) O for the three-tap operator O."""
    ab = np.zeros((3, n))
    diag, sup1, sup2 = ab[2], ab[1, 1:], ab[0, 2:]
    diag[2:] += w * c[0] ** 2
    diag[1:-1] += w * c[1] ** 2
    diag[:-2] += w * c[2] ** 2
    sup1[1:] += w * c[0] * c[1]   # pairs (i-1, i)
    sup1[:-1] += w * c[1] * c[2]  # pairs (i-2, i-1)
    sup2[:] += w * c[0] * c[2]    # pairs (i-2, i)
    return ab


def tonic_regressors(n: int, fs: float, knot_s: float) -> tuple[np.ndarray, int]:
    """Cubic B-splines with knots every ``knot_s`` seconds, then offset and trend.

    Returns the dense (n, n_spline + 2) matrix and the number of spline columns.
    """
    t = np.arange(n) / fs
    n_int = max(1, int(np.ceil(t[-1] / knot_s))) if n > 1 else 1
    knots = np.arange(-3, n_int + 4) * knot_s
    spline = BSpline.design_matrix(t, knots, 3).toarray()
    keep = spline.any(axis=0)
    spline = spline[:, keep]
    trend = np.c_[np.ones(n), np.arange(1.0, n + 1.0) / n]
    return np.hstack([spline, trend]), spline.shape[1]


@dataclass
class ConvexFit:
    phasic: np.ndarray  # in the units of y
    tonic: np.ndarray
    driver: np.ndarray
    iterations: int
    converged: bool
    objective: float = float("nan")  # value of the programme at the solution


def solve_window(y: np.ndarray, fs: float, cfg: ConvexSettings) -> ConvexFit:
    """Solve the cvxEDA quadratic programme on one window of standardised SC."""
    n = y.size
    if n < 8:
        return ConvexFit(np.zeros(n), y.copy(), np.zeros(n), 0, True, 0.0)
    ma, ar = bateman_arma(fs, cfg.tau_rise_s, cfg.tau_decay_s)
    other, n_spl = tonic_regressors(n, fs, cfg.knot_s)
    n_o = other.shape[1]
    ridge = np.r_[np.full(n_spl, cfg.gamma), np.zeros(n_o - n_spl)]
    m = n - 2

    # constant parts of the Hessian and the linear term
    mtm = _gram_bands(ma, np.ones(m), n)
    h_qo = _apply_t(ma, other[2:], n)              # M^T [B C]
    h_oo = other.T @ other + np.diag(ridge)
    c_q = -_apply_t(ma, y[2:], n) + cfg.alpha * _apply_t(ar, np.ones(m), n)
    c_o = -other.T @ y

    def q_times(q: np.ndarray, o: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        r = np.zeros(n)
        r[2:] = _apply(ma, q)
        k = r + other @ o
        kq = _apply_t(ma, k[2:], n)
        ko = other.T @ k + ridge * o
        return kq, ko

    q = np.zeros(n)
    o = np.linalg.solve(h_oo + 1e-9 * np.eye(n_o), -c_o)
    s = np.ones(m)
    z = np.ones(m)
    scale = 1.0 + max(np.abs(c_q).max(), np.abs(c_o).max())
    converged = False
    yy = abs(float(y @ y))
    best: tuple[float, np.ndarray, np.ndarray] = (np.inf, q.copy(), o.copy())
    it = 0
    for it in range(1, cfg.max_iterations + 1):
        hq, ho = q_times(q, o)
        rd_q = hq + c_q - _apply_t(ar, z, n)
        rd_o = ho + c_o
        gq = _apply(ar, q)
        rp = gq - s
        mu = float(s @ z) / m
        merit = max(max(np.abs(rd_q).max(), np.abs(rd_o).max()) / (DUAL_TOLERANCE * scale),
                    np.abs(rp).max() / (TOLERANCE * (1.0 + np.abs(gq).max())),
                    mu * m / (GAP_TOLERANCE * (1.0 + yy)))
        if merit < best[0]:
            best = (merit, q.copy(), o.copy())
        if merit <= 1.0:
            converged = True
            break
        w = z / s
        ab = mtm + _gram_bands(ar, w, n)
        ab[2] += 1e-12 * (1.0 + ab[2].max())
        try:
            chol = cholesky_banded(ab)
        except np.linalg.LinAlgError:
            raise StageError("the convex decomposition's Newton system is singular",
                             stage="signals",
                             hint="try [signals.decomposition] method = 'highpass'") from None
        y_qo = cho_solve_banded((chol, False), h_qo)
        schur = cho_factor(h_oo - h_qo.T @ y_qo)

        def newton(rc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
            # (Q + G^T W G) dx = -rd - G^T S^-1 (rc + Z rp)
            rhs_q = -rd_q - _apply_t(ar, (rc + z * rp) / s, n)
            rhs_o = -rd_o
            t = cho_solve_banded((chol, False), rhs_q)
            do = cho_solve(schur, rhs_o - h_qo.T @ t)
            dq = t - y_qo @ do
            ds = _apply(ar, dq) + rp
            dz = -(rc + z * ds) / s
            return dq, do, ds, dz

        def step(ds: np.ndarray, dz: np.ndarray) -> float:
            a = 1.0
            neg = ds < 0
            if neg.any():
                a = min(a, float((-s[neg] / ds[neg]).min()))
            neg = dz < 0
            if neg.any():
                a = min(a, float((-z[neg] / dz[neg]).min()))
            return a

        dq, do, ds, dz = newton(s * z)
        a_aff = step(ds, dz)
        mu_aff = float((s + a_aff * ds) @ (z + a_aff * dz)) / m
        sigma = (mu_aff / mu) ** 3
        dq, do, ds, dz = newton(s * z + ds * dz - sigma * mu)
        a = 0.99 * step(ds, dz)
        q += a * dq
        o += a * do
        s += a * ds
        z += a * dz
        np.maximum(s, 1e-300, out=s)
        np.maximum(z, 1e-300, out=z)
    if not converged:  # the best iterate seen (rounding can make later ones worse)
        q, o = best[1], best[2]
    phasic = np.zeros(n)
    phasic[2:] = _apply(ma, q)
    driver = np.zeros(n)
    driver[2:] = _apply(ar, q)
    tonic = other @ o
    resid = phasic + tonic - y
    objective = float(0.5 * resid @ resid + cfg.alpha * driver.sum()
                      + 0.5 * (ridge * o * o).sum())
    return ConvexFit(phasic, tonic, driver, it, converged, objective)


def decompose_convex(c: np.ndarray, fs: float, cfg: ConvexSettings
                     ) -> tuple[np.ndarray, np.ndarray, bool]:
    """Tonic and phasic components of a gap-free series, window by window.

    Each window (with its context) is standardised with its own mean and standard
    deviation, as the paper's programme expects of a laboratory-length recording (so
    that ``alpha`` and ``gamma`` mean what they mean there, however much the tonic
    level wanders over hours), and the components are scaled back to µS. Returns
    tonic, phasic and whether every window converged.

    References
    ----------
    Greco, A., Valenza, G., Lanata, A., Scilingo, E. P., & Citi, L. (2016). cvxEDA: a
    convex optimization approach to electrodermal activity processing. IEEE
    Transactions on Biomedical Engineering 63(4), 797-804.
    """
    n = c.size
    tonic = np.empty(n)
    phasic = np.empty(n)
    if n == 0:
        return tonic, phasic, True
    core = max(1, int(round(cfg.window_s * fs)))
    ctx = int(round(cfg.overlap_s * fs))
    all_ok = True
    for a in range(0, n, core):
        b = min(n, a + core)
        lo, hi = max(0, a - ctx), min(n, b + ctx)
        seg = c[lo:hi]
        mean, sd = float(np.mean(seg)), float(np.std(seg))
        if not sd > 0:
            tonic[a:b] = c[a:b]
            phasic[a:b] = 0.0
            continue
        fit = solve_window((seg - mean) / sd, fs, cfg)
        all_ok &= fit.converged
        tonic[a:b] = fit.tonic[a - lo: b - lo] * sd + mean
        phasic[a:b] = fit.phasic[a - lo: b - lo] * sd
    return tonic, phasic, all_ok
