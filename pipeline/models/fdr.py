"""Multiple-comparison corrections across a family of tests.

Each method turns a vector of p-values into adjusted p-values (``p_fdr``): a test is
rejected at false discovery rate q exactly when its adjusted p-value is at most q.
NaN p-values (terms not tested) stay NaN and do not count towards the family size.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from pipeline.errors import choose

FdrMethod = Callable[[np.ndarray], np.ndarray]


def _step_up(p: np.ndarray, factor: float) -> np.ndarray:
    """Step-up adjustment min_{j>=i} (factor * m / j) p_(j) on the non-NaN p-values."""
    p = np.asarray(p, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    m = int(ok.sum())
    if m == 0:
        return out
    vals = p[ok]
    order = np.argsort(vals, kind="mergesort")
    ranked = vals[order] * factor * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(ranked[::-1])[::-1]
    back = np.empty(m)
    back[order] = np.clip(adjusted, 0.0, 1.0)
    out[ok] = back
    return out


def adjust_benjamini_hochberg(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg step-up adjusted p-values (false discovery rate).

    Controls the FDR for independent or positively dependent tests.

    References
    ----------
    Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a
    practical and powerful approach to multiple testing. J R Stat Soc B 57:289-300.
    """
    return _step_up(p, 1.0)


def adjust_benjamini_yekutieli(p: np.ndarray) -> np.ndarray:
    """Benjamini-Yekutieli adjusted p-values: FDR control under any dependence.

    The Benjamini-Hochberg procedure with q divided by sum_{i<=m} 1/i.

    References
    ----------
    Benjamini, Y. & Yekutieli, D. (2001). The control of the false discovery rate in
    multiple testing under dependency. Ann Stat 29:1165-1188.
    """
    m = int(np.isfinite(np.asarray(p, dtype=float)).sum())
    c_m = float(np.sum(1.0 / np.arange(1, m + 1))) if m else 1.0
    return _step_up(p, c_m)


FDR_METHODS: dict[str, FdrMethod] = {
    "bh": adjust_benjamini_hochberg,   # Benjamini & Hochberg 1995
    "by": adjust_benjamini_yekutieli,  # Benjamini & Yekutieli 2001
}

FDR_REFERENCES: dict[str, str] = {
    "bh": "Benjamini & Hochberg (1995), J R Stat Soc B 57:289-300",
    "by": "Benjamini & Yekutieli (2001), Ann Stat 29:1165-1188",
}


def adjust_p(p: np.ndarray, method: str = "bh") -> np.ndarray:
    """Adjusted p-values of a family of tests by the named method."""
    fn = choose(FDR_METHODS, method, "[models] fdr_method")
    return fn(np.asarray(p, dtype=float))
