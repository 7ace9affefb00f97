"""Krippendorff's alpha for nominal data, any number of coders, missing values allowed."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.errors import choose


def value_counts_by_unit(codes: pd.DataFrame, categories: list[str] | None = None
                         ) -> tuple[np.ndarray, list[str]]:
    """Units-by-categories count matrix from a units-by-coders table of labels.

    Parameters
    ----------
    codes
        One row per unit (e.g. a second), one column per coder; a label, or NA where
        that coder did not code the unit.
    categories
        Category order; default: every label seen, sorted.

    Returns
    -------
    counts, categories
        ``counts[u, c]`` = how many coders gave unit ``u`` the label ``categories[c]``.
    """
    # Units are many (every second of every session when pooled), labels few:
    # factorize all cells at once and name each distinct label once (as text).
    n_units, n_coders = codes.shape
    cell, distinct = pd.factorize(codes.to_numpy(dtype=object).ravel())  # NA -> -1
    texts = [str(v) for v in np.asarray(distinct, dtype=object)]
    if categories is None:
        categories = sorted(set(texts))
    index = {c: i for i, c in enumerate(categories)}
    k = len(categories)
    labelled = cell >= 0
    position = np.full(cell.shape, -1, dtype=np.int64)
    position[labelled] = np.array([index.get(t, -1) for t in texts],
                                  dtype=np.int64)[cell[labelled]]
    if (position[labelled] < 0).any():
        raise ValueError("a label is missing from the category list")
    return counts_from_positions(position.reshape(n_units, n_coders), k), categories


def coincidence_matrix(counts: np.ndarray) -> np.ndarray:
    """Coincidence matrix ``o_ck`` of a units-by-categories count matrix.

    Each unit coded by ``m_u >= 2`` coders contributes its ``m_u (m_u - 1)`` ordered
    pairs of values, each weighted ``1 / (m_u - 1)``; units with fewer than two
    values are not pairable and contribute nothing.

    References
    ----------
    Krippendorff, K. (2011). Computing Krippendorff's alpha-reliability. Annenberg
    School for Communication, University of Pennsylvania (working paper).
    """
    counts = np.asarray(counts, dtype=float)
    m = counts.sum(axis=1)
    pairable = m >= 2
    n = counts[pairable]
    w = 1.0 / (m[pairable] - 1.0)
    o = (n * w[:, None]).T @ n
    o[np.diag_indices_from(o)] -= (n * w[:, None]).sum(axis=0)
    return o


def krippendorff_alpha_nominal(counts: np.ndarray) -> float:
    """Krippendorff's alpha for nominal data from a units-by-categories count matrix.

    ``alpha = 1 - D_o / D_e = 1 - (n - 1) * sum_{c != k} o_ck / sum_{c != k} n_c n_k``,
    with ``o_ck`` the coincidence matrix, ``n_c`` its margins and ``n`` the number of
    pairable values. NaN when undefined: fewer than two pairable values, or only one
    category used across all pairable values (``D_e = 0``).

    References
    ----------
    Krippendorff, K. (2011). Computing Krippendorff's alpha-reliability. Annenberg
    School for Communication, University of Pennsylvania (working paper).
    """
    return alpha_from_coincidences(coincidence_matrix(counts))


def alpha_from_coincidences(o: np.ndarray) -> float:
    """Nominal alpha from a coincidence matrix (see :func:`krippendorff_alpha_nominal`).

    Coincidences add up over units, so the matrices of several groups of units (e.g.
    sessions) summed over one category order give the alpha of all their units pooled.

    References
    ----------
    Krippendorff, K. (2011). Computing Krippendorff's alpha-reliability. Annenberg
    School for Communication, University of Pennsylvania (working paper).
    """
    o = np.asarray(o, dtype=float)
    nc = o.sum(axis=1)
    n = nc.sum()
    if n < 2:
        return float("nan")
    disagree_observed = o.sum() - np.trace(o)
    disagree_expected = (nc.sum() ** 2 - np.dot(nc, nc)) / (n - 1.0)
    if disagree_expected <= 0:
        return float("nan")
    return float(1.0 - disagree_observed / disagree_expected)


#: Reliability coefficients for any number of coders, by the name `method=` takes.
ALPHA_METHODS = {
    "nominal": krippendorff_alpha_nominal,  # Krippendorff 2011
}


def counts_from_positions(positions: np.ndarray, k: int) -> np.ndarray:
    """Units-by-categories count matrix from a units-by-coders array of category
    positions 0..k-1 (-1 where a coder did not code the unit): the integer form of
    :func:`value_counts_by_unit`, for callers that hold their labels as positions."""
    positions = np.asarray(positions, dtype=np.int64)
    n_units = positions.shape[0]
    unit = np.broadcast_to(np.arange(n_units, dtype=np.int64)[:, None], positions.shape)
    coded = positions >= 0
    flat = np.bincount(unit[coded] * k + positions[coded], minlength=n_units * k)
    return flat.reshape(n_units, k)


def pooled_alpha_from_coincidences(parts: list[tuple[list[str], np.ndarray]]) -> float:
    """Nominal alpha of several groups of units pooled, from each group's categories
    and coincidence matrix over them (as :func:`coincidence_matrix` gives it): the
    matrices are summed over the union of the categories. NaN for no groups.

    References
    ----------
    Krippendorff, K. (2011). Computing Krippendorff's alpha-reliability. Annenberg
    School for Communication, University of Pennsylvania (working paper).
    """
    if not parts:
        return float("nan")
    categories = sorted({c for cats, _ in parts for c in cats})
    index = {c: i for i, c in enumerate(categories)}
    total = np.zeros((len(categories), len(categories)))
    for cats, o in parts:
        at = np.array([index[c] for c in cats], dtype=np.int64)
        total[np.ix_(at, at)] += o
    return alpha_from_coincidences(total)


def pooled_alpha_nominal(tables: list[pd.DataFrame]) -> float:
    """Nominal alpha over the units of several units-by-coders label tables pooled,
    without stacking them: their coincidence matrices are summed (one table's counts in
    memory at a time). NaN for no tables."""
    parts = []
    for t in tables:
        counts, categories = value_counts_by_unit(t)
        parts.append((categories, coincidence_matrix(counts)))
    return pooled_alpha_from_coincidences(parts)


def alpha(codes: pd.DataFrame, level: str = "nominal") -> float:
    """Krippendorff's alpha of a units-by-coders label table (NA = not coded)."""
    fn = choose(ALPHA_METHODS, level, "alpha level of measurement")
    counts, _ = value_counts_by_unit(codes)
    return fn(counts)
