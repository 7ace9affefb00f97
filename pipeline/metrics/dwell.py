"""Dwell times: Kaplan–Meier survival of attention bouts (CONTRACT §2, dwell time).

A bout cut by a session edge, an uncoded gap or invalid signal is right-censored (its
length is a lower bound), so the median dwell time is the Kaplan–Meier median, not the
median of the observed lengths. The estimate itself comes from statsmodels
(:class:`statsmodels.duration.survfunc.SurvfuncRight`); this module fixes the median
convention and the output table.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pandas as pd
from statsmodels.duration.survfunc import SurvfuncRight

from pipeline.errors import choose

#: Tolerance for S(t) <= 0.5: the product-limit estimate is computed through logs, so
#: a survival of exactly one half can come out as 0.5000000000000001.
_HALF_TOLERANCE = 1e-9


def _as_arrays(durations, observed) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(durations, dtype=float)
    d = np.asarray(observed, dtype=bool)
    if t.shape != d.shape or t.ndim != 1:
        raise ValueError("durations and observed must be 1-D and of the same length")
    keep = np.isfinite(t)
    return t[keep], d[keep]


def _product_limit(t: np.ndarray, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct observed durations and the product-limit S(t) just after each.

    The same arithmetic, step for step, as statsmodels' ``SurvfuncRight`` (through the
    log of each factor, clipped at 1e-16), so that :func:`km_median` gives exactly the
    median :func:`km_curve`'s survival column gives. It skips the standard errors and
    the table, which the median does not need: the metrics stage takes a median per
    platform, per group and per session, and the full curve cost most of that time.
    """
    times, rank = np.unique(t, return_inverse=True)
    events = np.bincount(rank, weights=d.astype(float), minlength=len(times))
    # bouts still running just before each distinct duration
    at_risk = np.cumsum(np.bincount(rank, minlength=len(times))[::-1])[::-1]
    keep = np.flatnonzero(events > 0)
    factor = 1 - events[keep] / at_risk[keep].astype(np.float64)
    dead = factor < 1e-16
    factor[dead] = 1e-16
    survival = np.exp(np.cumsum(np.log(factor)))
    survival[dead] = 0
    return times[keep], survival


def km_curve(durations, observed) -> pd.DataFrame:
    """Kaplan–Meier survival curve with Greenwood standard errors.

    Parameters
    ----------
    durations : array_like
        Bout lengths (s); NaN entries are ignored.
    observed : array_like of bool
        True where the bout's end was observed, False where it is right-censored.

    Returns
    -------
    DataFrame
        One row per distinct observed (uncensored) duration, ascending: time_s,
        survival (the product-limit estimate S(t) just after t), std_error (Greenwood;
        NaN where S(t) = 0, as statsmodels gives it), at_risk (bouts still running just
        before t). Empty when no bout end was observed; S(t) = 1 before the first row.

    References
    ----------
    Kaplan, E. L., & Meier, P. (1958). Nonparametric estimation from incomplete
    observations. Journal of the American Statistical Association, 53, 457–481.

    Greenwood, M. (1926). The natural duration of cancer. Reports on Public Health and
    Medical Subjects, 33, 1–26. His Majesty's Stationery Office.
    """
    t, d = _as_arrays(durations, observed)
    if not d.any():
        return pd.DataFrame({
            "time_s": pd.Series([], dtype=float),
            "survival": pd.Series([], dtype=float),
            "std_error": pd.Series([], dtype=float),
            "at_risk": pd.Series([], dtype=np.int64),
        })
    sf = SurvfuncRight(t, d.astype(float))
    return pd.DataFrame({
        "time_s": np.asarray(sf.surv_times, dtype=float),
        "survival": np.asarray(sf.surv_prob, dtype=float),
        "std_error": np.asarray(sf.surv_prob_se, dtype=float),
        "at_risk": np.asarray(sf.n_risk).astype(np.int64),
    })


def km_median(durations, observed) -> float:
    """Kaplan–Meier median: the smallest time t with S(t) <= 0.5.

    This is the definition lifelines uses for ``KaplanMeierFitter.median_survival_time_``
    (``qth_survival_time(0.5)``: first t where S(t) <= 0.5), with two differences:
    where S never falls to 0.5 (too many long censored bouts) lifelines reports
    ``inf`` and this function NaN; and S(t) = 0.5 is recognised up to 1e-9, because the
    product-limit estimate computed through logs can land a hair above one half.
    It differs from statsmodels' ``SurvfuncRight.quantile(0.5)``, which uses the strict
    S(t) < 0.5 (as SAS does), and from R's ``survfit``, which, where S(t) equals 0.5
    exactly over an interval, reports the midpoint between t and the next event time.

    Parameters
    ----------
    durations : array_like
        Bout lengths (s); NaN entries are ignored.
    observed : array_like of bool
        True where the bout's end was observed, False where it is right-censored.

    Returns
    -------
    float
        The median (s), or NaN when there is no bout or S never drops to 0.5 or below.

    References
    ----------
    Kaplan, E. L., & Meier, P. (1958). Nonparametric estimation from incomplete
    observations. Journal of the American Statistical Association, 53, 457–481.
    """
    times, survival = _product_limit(*_as_arrays(durations, observed))
    below = np.flatnonzero(survival <= 0.5 + _HALF_TOLERANCE)
    if len(below) == 0:
        return float("nan")
    return float(times[below[0]])


#: Median dwell time methods, chosen by name (house style: one function per method).
DWELL_MEDIAN_METHODS: dict[str, Callable[..., float]] = {
    "kaplan_meier": km_median,  # Kaplan & Meier (1958)
}


def dwell_median(durations, observed, method: str = "kaplan_meier") -> float:
    """Median dwell time by the named method (see :data:`DWELL_MEDIAN_METHODS`)."""
    fn = choose(DWELL_MEDIAN_METHODS, method, "dwell median method")
    return fn(durations, observed)
