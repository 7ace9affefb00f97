"""Kaplan–Meier curves of dwell time for the dwell chart.

Dwell times are bout lengths; a bout cut by a session edge, an uncoded gap or invalid
signal is right-censored (CONTRACT §2), so its true length is only known to be at
least the one observed. The product-limit estimator uses such bouts while they are
at risk and then drops them, instead of counting them as ended.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def kaplan_meier(durations, observed) -> pd.DataFrame:
    """Product-limit estimate of the survival function S(t) = P(dwell > t).

    Parameters
    ----------
    durations : array-like of float
        Bout lengths (s). Non-finite or negative lengths are ignored.
    observed : array-like of bool
        True where the bout's end was seen, False where it is right-censored.

    Returns
    -------
    DataFrame
        One row per distinct duration: ``time_s``, ``at_risk``, ``events``,
        ``censored`` and ``survival`` (S just after ``time_s``).

    References
    ----------
    Kaplan, E. L. & Meier, P. (1958). Nonparametric estimation from incomplete
    observations. Journal of the American Statistical Association 53:457–481.
    """
    d = np.asarray(durations, dtype=float)
    e = np.asarray(observed, dtype=bool)
    if d.shape != e.shape:
        raise ValueError("durations and observed differ in length")
    keep = np.isfinite(d) & (d >= 0)
    d, e = d[keep], e[keep]
    if d.size == 0:
        return pd.DataFrame({"time_s": [], "at_risk": [], "events": [], "censored": [],
                             "survival": []})
    times, inv = np.unique(d, return_inverse=True)
    total = np.bincount(inv, minlength=times.size)
    events = np.bincount(inv, weights=e.astype(float), minlength=times.size)
    at_risk = d.size - np.concatenate([[0], np.cumsum(total)[:-1]])
    survival = np.cumprod(1.0 - events / at_risk)
    return pd.DataFrame({"time_s": times, "at_risk": at_risk.astype(int),
                         "events": events.astype(int), "censored": (total - events).astype(int),
                         "survival": survival})


def km_median(curve: pd.DataFrame) -> float:
    """Kaplan–Meier median: the first time at which S(t) <= 0.5 (NaN if never reached).

    References
    ----------
    Kaplan, E. L. & Meier, P. (1958), as above. Taking the first time the curve
    reaches 0.5 is the usual convention (the one lifelines uses, for instance).
    """
    hit = curve.loc[curve["survival"] <= 0.5, "time_s"]
    return float(hit.iloc[0]) if len(hit) else float("nan")
