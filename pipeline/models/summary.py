"""Readable sentences from model rows: effects back-transformed into the outcome's units."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

#: Unit and display factor by outcome name (or its prefix before '[').
_UNITS: dict[str, tuple[str, float]] = {
    "media_hours": ("h", 1.0),
    "multi_hours": ("h", 1.0),
    "coded_hours": ("h", 1.0),
    "multi_share": ("percentage points", 100.0),
    "dwell_median_s": ("s", 1.0),
    "scr_per_min": ("SCRs/min", 1.0),
    "hr_mean_bpm": ("beats/min", 1.0),
    "switches_per_hour": ("switches/h", 1.0),
}


def unit_of(outcome: str) -> tuple[str, float]:
    """(unit label, display factor) of an outcome, e.g. ('h', 1.0) for media_hours."""
    base = outcome.split("[", 1)[0]
    if base in _UNITS:
        return _UNITS[base]
    if base.startswith("arousal_"):
        return ("z", 1.0)
    for suffix, unit in (("_s", "s"), ("_hours", "h"), ("_bpm", "beats/min"),
                         ("_us", "µS"), ("_per_min", "/min")):
        if base.endswith(suffix):
            return (unit, 1.0)
    return ("", 1.0)


def fmt_num(x: float, digits: int = 3) -> str:
    if x is None or not np.isfinite(x):
        return "n/a"
    if x == 0:
        return "0"
    mag = math.floor(math.log10(abs(x)))
    decimals = max(digits - 1 - mag, 0)
    return f"{x:.{decimals}f}"


def fmt_p(p: float) -> str:
    if p is None or not np.isfinite(p):
        return "p n/a"
    if p < 0.001:
        return "p < 0.001"
    return f"p = {p:.3f}"


def describe_term(term: str, reference: str, ref_state: str | None) -> str:
    """'b vs a', 'multi vs single in a', 'multi - single difference, b vs a' ..."""
    parts = term.split(":")
    if len(parts) == 2 and parts[0].startswith("cohort[") and parts[1].startswith("state["):
        c, s = parts[0][7:-1], parts[1][6:-1]
        return f"{s} - {ref_state} difference, {c} vs {reference}"
    if term.startswith("cohort["):
        c = term[7:-1]
        return f"{c} vs {reference}" + (f" in {ref_state}" if ref_state else "")
    if term.startswith("state["):
        return f"{term[6:-1]} vs {ref_state} in {reference}"
    return term


def effect_text(row: pd.Series, confidence: float, rate: bool = False) -> str:
    """The effect of one row in the outcome's own units (a ratio on the log scale)."""
    pct = f"{confidence * 100:g}% CI"
    if row["scale"] == "log":
        name = "rate ratio" if rate else "ratio"
        return (f"{name} {fmt_num(np.exp(row['estimate']))} ({pct} "
                f"{fmt_num(np.exp(row['ci_low']))} to {fmt_num(np.exp(row['ci_high']))})")
    unit, factor = unit_of(str(row["outcome"]))
    u = f" {unit}" if unit else ""
    est = row["estimate"] * factor
    sign = "+" if est > 0 else ""
    return (f"difference {sign}{fmt_num(est)}{u} ({pct} {fmt_num(row['ci_low'] * factor)} "
            f"to {fmt_num(row['ci_high'] * factor)})")


def row_sentence(row: pd.Series, reference: str, ref_state: str | None,
                 confidence: float, model_label: str, rate: bool = False) -> str:
    p_fdr = row.get("p_fdr", np.nan)
    fdr = f", FDR-adjusted {fmt_p(p_fdr)}" if np.isfinite(p_fdr) else ""
    extra = "" if row["converged"] else " [did not converge]"
    return (f"{row['outcome']}, {describe_term(row['term'], reference, ref_state)}: "
            f"{effect_text(row, confidence, rate)}, {fmt_p(row['p_value'])}{fdr} "
            f"({model_label}, {int(row['n_participants'])} participants, "
            f"{int(row['n_obs'])} rows){extra}")


def disagreement(mixed: pd.Series, count: pd.Series, alpha: float) -> str | None:
    """Why the mixed model and the count model disagree on one cohort term, or None.

    They disagree when one finds a difference at level ``alpha`` and the other does not,
    or when both do but in opposite directions.
    """
    pm, pc = mixed["p_value"], count["p_value"]
    if not (np.isfinite(pm) and np.isfinite(pc)):
        return None
    sig_m, sig_c = pm < alpha, pc < alpha
    opposite = np.sign(mixed["estimate"]) != np.sign(count["estimate"])
    if sig_m != sig_c:
        which = "the mixed model" if sig_m else "the count model"
        return f"only {which} finds a difference at the {alpha:g} level"
    if sig_m and sig_c and opposite:
        return "both find a difference, in opposite directions"
    return None
