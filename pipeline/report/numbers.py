"""How numbers are written in the report, the deck and the chart titles.

The data files keep full precision; rounding happens here only, the same way in every
output, so a number on a slide can be found again in the report and traced to its CSV.
"""

from __future__ import annotations

import math


def is_num(x) -> bool:
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def num(x, digits: int = 2) -> str:
    """An estimate: ``digits`` decimals; three significant digits when very small."""
    if not is_num(x):
        return "n/a"
    x = float(x)
    if x != 0 and abs(x) < 10 ** (-digits):
        return f"{x:.2g}"
    return f"{x:.{digits}f}"


def auto(x) -> str:
    """A descriptive value: decimals shrink as the magnitude grows."""
    if not is_num(x):
        return "n/a"
    x = float(x)
    a = abs(x)
    if a >= 100:
        return f"{x:.0f}"
    if a >= 10:
        return f"{x:.1f}"
    return num(x, 2)


def short(x) -> str:
    """Up to three significant digits, no trailing zeros (``2 s``, ``2.5 s``, ``12.3 s``)."""
    if not is_num(x):
        return "n/a"
    x = float(x)
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:.3g}"


def pct(share, digits: int = 0) -> str:
    """A share (0-1) as a percentage."""
    if not is_num(share):
        return "n/a"
    return f"{100 * float(share):.{digits}f}%"


def p_value(p) -> str:
    """``p = 0.012`` / ``p < 0.001``."""
    if not is_num(p):
        return "p n/a"
    p = float(p)
    if p < 0.001:
        return "p < 0.001"
    return f"p = {p:.3f}"


def interval(low, high, digits: int = 2) -> str:
    """``1.10–1.83``; with a negative bound ``-0.37 to -0.05`` (a dash would read as minus)."""
    sep = " to " if (is_num(low) and float(low) < 0) or (is_num(high) and float(high) < 0) else "–"
    return f"{num(low, digits)}{sep}{num(high, digits)}"


def count(n) -> str:
    if not is_num(n):
        return "n/a"
    return f"{int(round(float(n))):,}"


def plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word if n == 1 else (many or word + 's')}"
