"""What every chart builder shares: the Figure it returns and data helpers."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import altair as alt
import numpy as np
import pandas as pd
from scipy import stats

from pipeline.report.run_files import Missing  # noqa: F401  (re-exported for builders)

STUDENT = "Student (1908). The probable error of a mean. Biometrika 6:1–25."


@dataclass
class Figure:
    """One chart and the finding it carries.

    ``chart`` has no title: the files add ``finding`` as title and ``caption`` as
    subtitle, the report page and the deck show them as text beside the chart.
    """

    name: str
    chart: alt.TopLevelMixin
    finding: str  # the finding with its number: slide title and figure heading
    detail: str  # the statistics behind it (interval, p, n)
    caption: str  # what is drawn
    method: str  # how it was computed and on how many (speaker notes, report)
    references: list[str] = field(default_factory=list)
    from_model: bool = False  # the finding is a model effect (already a headline)


def _clean(v):
    if v is None or v is pd.NA or v is pd.NaT:
        return None
    if isinstance(v, (np.bool_, bool)):
        return bool(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return float(v) if math.isfinite(v) else None
    return v if isinstance(v, (int, str)) else str(v)


def values(df: pd.DataFrame) -> list[dict]:
    """JSON-safe records (NaN and inf become null, numpy scalars become Python)."""
    cols = list(df.columns)
    return [{c: _clean(v) for c, v in zip(cols, row)}
            for row in df.itertuples(index=False, name=None)]


def data(df: pd.DataFrame) -> dict:
    """Inline data for a chart, as a plain dict (Altair then stores it once under
    ``datasets``; wrapping thousands of records in schema objects would be slow)."""
    return {"values": values(df)}


def mean_ci(x, level: float = 0.95) -> tuple[float, float, float, int]:
    """Mean and Student-t confidence interval of the finite values of ``x``.

    References
    ----------
    Student (1908). The probable error of a mean. Biometrika 6:1–25.
    """
    a = np.asarray(x, dtype=float)
    a = a[np.isfinite(a)]
    n = int(a.size)
    if n == 0:
        return float("nan"), float("nan"), float("nan"), 0
    m = float(a.mean())
    if n < 2:
        return m, float("nan"), float("nan"), n
    half = float(stats.t.ppf(0.5 + level / 2, n - 1) * a.std(ddof=1) / math.sqrt(n))
    return m, m - half, m + half, n


def session_label(pid: str, sid: str) -> str:
    return f"{pid}/{sid}"


def spread(n: int, width: float = 0.6) -> np.ndarray:
    """Evenly spaced offsets in [-width/2, width/2] for n items (0 for one item)."""
    if n <= 1:
        return np.zeros(n)
    return np.linspace(-width / 2, width / 2, n)


RATIO_TICKS = (0.1, 0.2, 0.25, 0.33, 0.5, 0.67, 0.8, 1.0, 1.25, 1.5, 2.0, 3.0, 4.0, 5.0, 10.0)


def ratio_ticks(domain: list[float]) -> list[float]:
    """Readable tick values for a ratio on a log axis (always including 1 if in range)."""
    lo, hi = domain
    ticks = [t for t in RATIO_TICKS if lo <= t <= hi]
    if len(ticks) < 3:
        ticks = sorted(set(ticks) | {round(v, 2) for v in np.geomspace(lo, hi, 4)[1:-1]})
    return ticks
