"""Fixed-effects designs with readable term names.

Treatment coding against a reference level, built directly (no formula parser, so
cohort and platform-group names may hold any character). Term names:

* ``Intercept``
* ``cohort[b]``: cohort b compared with the reference cohort
* ``state[multi]``: multi compared with the reference state
* ``cohort[b]:state[multi]``: how much more (or less) the multi - single difference is
  in cohort b than in the reference cohort
* a numeric covariate by its column name; a text covariate as ``name[level]`` against
  its first level in sorted order
"""

from __future__ import annotations

import pandas as pd


def treatment_columns(values: pd.Series, levels: list[str], reference: str,
                      prefix: str) -> pd.DataFrame:
    """0/1 indicator columns ``prefix[level]`` for every level except the reference."""
    text = values.astype(str)
    return pd.DataFrame({f"{prefix}[{lv}]": (text == lv).astype(float).to_numpy()
                         for lv in levels if lv != reference}, index=values.index)


def covariate_columns(data: pd.DataFrame, covariates: list[str]) -> pd.DataFrame:
    """Numeric covariates as they are; text covariates as treatment indicators."""
    cols = {}
    for name in covariates:
        col = data[name]
        if pd.api.types.is_bool_dtype(col):
            cols[name] = col.astype(float).to_numpy()
        elif pd.api.types.is_numeric_dtype(col):
            cols[name] = col.astype(float).to_numpy()
        else:
            levels = sorted(col.astype(str).unique())
            for lv in levels[1:]:
                cols[f"{name}[{lv}]"] = (col.astype(str) == lv).astype(float).to_numpy()
    return pd.DataFrame(cols, index=data.index)


def interaction_columns(a: pd.DataFrame, b: pd.DataFrame) -> pd.DataFrame:
    """Products of every column of ``a`` with every column of ``b``, named ``a:b``."""
    return pd.DataFrame({f"{ca}:{cb}": (a[ca] * b[cb]).to_numpy()
                         for ca in a.columns for cb in b.columns}, index=a.index)


def cohort_design(data: pd.DataFrame, cohorts: list[str], reference: str,
                  covariates: list[str], states: list[str] | None = None) -> pd.DataFrame:
    """Design of ``cohort (+ covariates)`` or, with ``states``, ``cohort * state (+ cov.)``.

    ``data`` needs a ``cohort`` column, the covariate columns and, for the state model,
    a ``state`` column; ``states[0]`` is the reference state.
    """
    parts = [pd.DataFrame({"Intercept": 1.0}, index=data.index)]
    coh = treatment_columns(data["cohort"], cohorts, reference, "cohort")
    parts.append(coh)
    if states is not None:
        st = treatment_columns(data["state"], states, states[0], "state")
        parts.append(st)
        parts.append(interaction_columns(coh, st))
    if covariates:
        parts.append(covariate_columns(data, covariates))
    return pd.concat(parts, axis=1)


def is_cohort_term(term: str) -> bool:
    """True for terms that compare cohorts (main effects and interactions with cohort)."""
    return term.startswith("cohort[")
