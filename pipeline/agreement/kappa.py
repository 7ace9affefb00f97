"""Two-coder agreement on categories: percent agreement, Cohen's kappa, Landis & Koch bands.

Everything here works on a square contingency table ``table[i, j]`` = number of units
coder A put in category i and coder B put in category j (same category order on both
axes), so that per-session tables can be summed into a pooled study table before the
coefficient is computed.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pandas as pd

from pipeline.errors import choose


def contingency_table(a: pd.Series | np.ndarray, b: pd.Series | np.ndarray,
                      categories: list[str] | None = None) -> tuple[np.ndarray, list[str]]:
    """Cross-tabulate two coders' labels of the same units.

    Parameters
    ----------
    a, b
        Labels of the same units by coder A and coder B, equal length, no missing.
    categories
        Category order of the table; default: every label seen, sorted.

    Returns
    -------
    table, categories
        ``table[i, j]`` counts units labelled ``categories[i]`` by A and
        ``categories[j]`` by B.
    """
    a = np.asarray(a, dtype=object)
    b = np.asarray(b, dtype=object)
    if a.shape != b.shape:
        raise ValueError(f"coders label different numbers of units ({a.size} vs {b.size})")
    # Units are many (the seconds of a session), labels few: factorize both coders'
    # labels together, then look each distinct label up once.
    codes, uniques = pd.factorize(np.concatenate([a, b]), use_na_sentinel=True)
    if (codes < 0).any():
        raise ValueError("a label is missing (NA): every unit needs a label of both coders")
    distinct = np.asarray(uniques, dtype=object).tolist()
    if categories is None:
        categories = sorted(distinct)
    index = {c: i for i, c in enumerate(categories)}
    k = len(categories)
    position = np.array([index.get(u, -1) for u in distinct], dtype=np.int64)[codes]
    return contingency_table_of_codes(position[: a.size], position[a.size:], k), list(categories)


def contingency_table_of_codes(ia: np.ndarray, ib: np.ndarray, k: int) -> np.ndarray:
    """:func:`contingency_table` of labels given as category positions 0..k-1.

    For callers that hold many units' labels as small integers already; a position
    outside 0..k-1 (e.g. -1 for a missing label) is refused.
    """
    ia = np.asarray(ia, dtype=np.int64)
    ib = np.asarray(ib, dtype=np.int64)
    if ia.shape != ib.shape:
        raise ValueError(f"coders label different numbers of units ({ia.size} vs {ib.size})")
    if ((ia < 0) | (ia >= k) | (ib < 0) | (ib >= k)).any():
        raise ValueError("a label is missing from the category list")
    return np.bincount(ia * k + ib, minlength=k * k).reshape(k, k)


def observed_agreement(table: np.ndarray) -> float:
    """Share of units both coders put in the same category (percent agreement / 100).

    NaN for an empty table.
    """
    table = np.asarray(table, dtype=float)
    n = table.sum()
    return float(np.trace(table) / n) if n > 0 else float("nan")


def chance_agreement(table: np.ndarray) -> float:
    """Agreement expected by chance from each coder's own marginal distribution.

    ``p_e = sum_k p_{A,k} p_{B,k}`` (Cohen 1960). NaN for an empty table.
    """
    table = np.asarray(table, dtype=float)
    n = table.sum()
    if n == 0:
        return float("nan")
    return float(np.dot(table.sum(axis=1), table.sum(axis=0)) / n**2)


def cohen_kappa(table: np.ndarray) -> float:
    """Cohen's kappa of a square two-coder contingency table.

    ``kappa = (p_o - p_e) / (1 - p_e)``, with ``p_o`` the observed and ``p_e`` the
    chance agreement computed from the two coders' separate marginals.

    Returns NaN when kappa is undefined: an empty table, or ``p_e = 1`` (both coders
    used one and the same category for every unit, so no disagreement was possible).

    References
    ----------
    Cohen, J. (1960). A coefficient of agreement for nominal scales. *Educational and
    Psychological Measurement*, 20(1), 37-46.
    """
    table = np.asarray(table, dtype=float)
    if table.ndim != 2 or table.shape[0] != table.shape[1]:
        raise ValueError(f"kappa needs a square table, got shape {table.shape}")
    po = observed_agreement(table)
    pe = chance_agreement(table)
    if not np.isfinite(pe) or pe >= 1.0:
        return float("nan")
    return float((po - pe) / (1.0 - pe))


#: Chance-corrected two-coder coefficients, by the name `method=` takes.
KAPPA_METHODS: dict[str, Callable[[np.ndarray], float]] = {
    "cohen": cohen_kappa,  # Cohen 1960
}


def kappa(table: np.ndarray, method: str = "cohen") -> float:
    """Chance-corrected agreement of a contingency table by the named method."""
    fn = choose(KAPPA_METHODS, method, "kappa method")
    return fn(table)


#: Upper bounds (inclusive) and labels of the Landis & Koch (1977) bands.
LANDIS_KOCH_BANDS: tuple[tuple[float, str], ...] = (
    (0.20, "slight"),
    (0.40, "fair"),
    (0.60, "moderate"),
    (0.80, "substantial"),
    (1.00, "almost perfect"),
)


def landis_koch_band(value: float) -> str:
    """Verbal strength-of-agreement band of a kappa value.

    Below 0 ``poor``; 0-0.20 ``slight``; 0.21-0.40 ``fair``; 0.41-0.60 ``moderate``;
    0.61-0.80 ``substantial``; 0.81-1.00 ``almost perfect``. The published bands are
    given to two decimals; a value between two of them (0.205) belongs to the higher
    band, i.e. each band's upper bound is inclusive. NaN gives ``''``.

    References
    ----------
    Landis, J. R., & Koch, G. G. (1977). The measurement of observer agreement for
    categorical data. *Biometrics*, 33(1), 159-174.
    """
    if value is None or not np.isfinite(value):
        return ""
    if value < 0:
        return "poor"
    for upper, label in LANDIS_KOCH_BANDS:
        if value <= upper + 1e-12:
            return label
    return LANDIS_KOCH_BANDS[-1][1]


def landis_koch_bands(values: pd.Series) -> pd.Series:
    """:func:`landis_koch_band` of each value of a Series (same index)."""
    return values.map(landis_koch_band).astype(object)
