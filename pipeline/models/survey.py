"""Survey items: one cohort comparison per item, FDR across the items.

Each participant contributes one value per item (several values of one item are
averaged, and the note says so). Every cohort is compared with the reference cohort.
"""

from __future__ import annotations

import warnings
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from pipeline.errors import choose, ConfigError
from pipeline.models.fdr import adjust_p

SURVEY_COLUMNS = ["item", "method", "cohort", "reference", "n_cohort", "n_reference",
                  "median_cohort", "median_reference", "statistic", "effect",
                  "effect_measure", "ci_low", "ci_high", "p_value", "p_fdr", "note"]


def compare_mann_whitney(x: np.ndarray, ref: np.ndarray, confidence: float = 0.95) -> dict:
    """Two-sided Mann-Whitney U test of ``x`` against ``ref``, with rank-biserial r.

    U counts the pairs (x_i, ref_j) with x_i > ref_j (ties count one half); the
    rank-biserial correlation r = 2U / (n_x n_ref) - 1 is the share of pairs in which
    ``x`` is higher minus the share in which it is lower (positive: ``x`` higher).
    The p-value is exact for small samples without ties, else the normal approximation
    with tie correction (scipy's ``method="auto"``).

    References
    ----------
    Mann, H. B. & Whitney, D. R. (1947). On a test of whether one of two random
    variables is stochastically larger than the other. Ann Math Stat 18:50-60.
    Kerby, D. S. (2014). The simple difference formula: an approach to teaching
    nonparametric correlation. Comprehensive Psychology 3:11.IT.3.1.
    """
    res = stats.mannwhitneyu(x, ref, alternative="two-sided", method="auto")
    u = float(res.statistic)
    r = 2 * u / (len(x) * len(ref)) - 1
    return {"statistic": u, "effect": r, "effect_measure": "rank_biserial_r",
            "ci_low": np.nan, "ci_high": np.nan, "p_value": float(res.pvalue), "note": ""}


def compare_ordinal_logit(x: np.ndarray, ref: np.ndarray, confidence: float = 0.95) -> dict:
    """Proportional-odds (ordinal logistic) model with cohort as the only predictor.

    The effect is the log odds ratio of a higher response in ``x`` than in ``ref``,
    with a Wald interval and test.

    References
    ----------
    McCullagh, P. (1980). Regression models for ordinal data. J R Stat Soc B
    42:109-142.
    """
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    y = np.concatenate([x, ref])
    levels = np.unique(y)
    if len(levels) < 2:
        return _untested("all responses are the same value")
    exog = pd.DataFrame({"cohort": np.r_[np.ones(len(x)), np.zeros(len(ref))]})
    endog = pd.Series(pd.Categorical(y, categories=levels, ordered=True))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            res = OrderedModel(endog, exog, distr="logit").fit(method="bfgs", disp=False)
        except (np.linalg.LinAlgError, ValueError) as err:
            return _untested(f"fit failed ({err})")
    est, se = float(res.params["cohort"]), float(res.bse["cohort"])
    crit = stats.norm.ppf(0.5 + confidence / 2)
    note = []
    if not res.mle_retvals.get("converged", True):
        note.append("did not converge")
    if any("overflow" in str(w.message) or "separation" in str(w.message).lower()
           for w in caught) or not np.isfinite(se):
        note.append("the cohorts are (almost) completely separated: the odds ratio is "
                    "not estimable")
    return {"statistic": est / se if se > 0 else np.nan, "effect": est,
            "effect_measure": "log_odds_ratio", "ci_low": est - crit * se,
            "ci_high": est + crit * se,
            "p_value": float(2 * stats.norm.sf(abs(est / se))) if se > 0 else np.nan,
            "note": "; ".join(note)}


def _untested(why: str) -> dict:
    return {"statistic": np.nan, "effect": np.nan, "effect_measure": "", "ci_low": np.nan,
            "ci_high": np.nan, "p_value": np.nan, "note": f"not tested: {why}"}


SURVEY_METHODS: dict[str, Callable[..., dict]] = {
    "mann_whitney": compare_mann_whitney,    # Mann & Whitney 1947; Kerby 2014
    "ordinal_logit": compare_ordinal_logit,  # McCullagh 1980
}

SURVEY_REFERENCES: dict[str, str] = {
    "mann_whitney": "Mann-Whitney U test per item (Mann & Whitney 1947, Ann Math Stat "
    "18:50-60) with the rank-biserial correlation (Kerby 2014, Comprehensive Psychology 3)",
    "ordinal_logit": "proportional-odds logistic model per item (McCullagh 1980, J R Stat "
    "Soc B 42:109-142)",
}


def survey_methods(method: str = "mann_whitney", fdr_method: str = "bh") -> dict[str, str]:
    """Method text (with references) of the survey comparison, for the methods section."""
    from pipeline.models.fdr import FDR_REFERENCES

    return {"survey": f"{SURVEY_REFERENCES[method]}; each cohort against the reference "
            f"cohort; false discovery rate across items by {FDR_REFERENCES[fdr_method]}"}


def compare_survey(survey: pd.DataFrame | None, roster: pd.DataFrame, fdr_q: float = 0.05,
                   *, method: str = "mann_whitney", reference: str | None = None,
                   items: list[str] | None = None, min_participants: int = 3,
                   fdr_method: str = "bh", confidence: float = 0.95,
                   include: list[str] | None = None) -> pd.DataFrame:
    """Per survey item, each cohort against the reference cohort (models/survey.csv).

    Parameters
    ----------
    survey : participant_id, item, value (numeric), or None when the study has none.
    roster : participant_id, cohort.
    fdr_q : false discovery rate; ``p_fdr`` at or below it is a discovery.
    method : key of :data:`SURVEY_METHODS` (``[models] survey_method``).
    reference : reference cohort (default: first in sorted order of the compared cohorts).
    items : items analysed (``[survey] items``; default every item seen).
    min_participants : fewer responding participants in a cohort gives a not-tested row.
    fdr_method : key of :data:`pipeline.models.fdr.FDR_METHODS`, across all rows.
    include : cohorts compared (``[cohorts] include``, as the models take it); None or
        empty compares every cohort of the roster. The others' answers are left out.

    Returns
    -------
    DataFrame with :data:`SURVEY_COLUMNS`, one row per item and compared cohort.
    """
    fn = choose(SURVEY_METHODS, method, "[models] survey_method")
    if survey is None or len(survey) == 0:
        return pd.DataFrame(columns=SURVEY_COLUMNS)
    s = survey.copy()
    s["participant_id"] = s["participant_id"].astype(str)
    s["item"] = s["item"].astype(str)
    s["value"] = pd.to_numeric(s["value"], errors="coerce")
    r = roster[["participant_id", "cohort"]].astype(str)
    s = s.merge(r, on="participant_id", how="inner")
    known = sorted(r["cohort"].unique())
    for name in [*(include or []), *([reference] if reference is not None else [])]:
        if name not in known:
            raise ConfigError(f"[cohorts] names cohort {name!r}, which is not a cohort of "
                              "this study", hint=f"cohorts in the roster: {', '.join(known)}")
    cohorts = sorted(set(include)) if include else known
    s = s[s["cohort"].isin(cohorts)]
    ref = reference if reference is not None else (cohorts[0] if cohorts else "")
    wanted = items if items else sorted(s["item"].unique())
    rows = []
    for item in wanted:
        d = s[(s["item"] == item) & s["value"].notna()]
        per = d.groupby(["participant_id", "cohort"], as_index=False)["value"].agg(
            ["mean", "size"])
        notes = []
        repeated = int((per["size"] > 1).sum())
        if repeated:
            notes.append(f"{repeated} participant(s) answered more than once: their mean used")
        others = [c for c in cohorts if c != ref]
        if ref not in cohorts:
            rows.append(_row(item, method, "", ref, per, _untested(
                f"the reference cohort {ref} is not among [cohorts] include"), notes))
            continue
        if not others:
            rows.append(_row(item, method, "", ref, per, _untested(
                "fewer than two cohorts compared"), notes))
            continue
        for c in others:
            x = per.loc[per["cohort"] == c, "mean"].to_numpy(float)
            y = per.loc[per["cohort"] == ref, "mean"].to_numpy(float)
            if len(d) == 0:
                res = _untested("no responses to this item")
            elif min(len(x), len(y)) < min_participants:
                res = _untested(f"too few participants answered ({c}: {len(x)}, {ref}: "
                                f"{len(y)}; at least {min_participants} per cohort needed)")
            else:
                res = fn(x, y, confidence)
            rows.append(_row(item, method, c, ref, per, res, notes))
    out = pd.DataFrame(rows, columns=SURVEY_COLUMNS)
    out["p_fdr"] = adjust_p(out["p_value"].to_numpy(float), fdr_method)
    return out


def _row(item: str, method: str, cohort: str, ref: str, per: pd.DataFrame, res: dict,
         notes: list[str]) -> dict:
    x = per.loc[per["cohort"] == cohort, "mean"]
    y = per.loc[per["cohort"] == ref, "mean"]
    note = "; ".join([n for n in [*notes, res.get("note", "")] if n])
    return {"item": item, "method": method, "cohort": cohort, "reference": ref,
            "n_cohort": int(len(x)), "n_reference": int(len(y)),
            "median_cohort": float(x.median()) if len(x) else np.nan,
            "median_reference": float(y.median()) if len(y) else np.nan,
            "statistic": res["statistic"], "effect": res["effect"],
            "effect_measure": res["effect_measure"], "ci_low": res["ci_low"],
            "ci_high": res["ci_high"], "p_value": res["p_value"], "p_fdr": np.nan,
            "note": note}
