"""Headline findings written from the model results (OUT/models/comparisons.csv).

Each row of comparisons.csv is one model term. Rows on the log scale (``scale ==
'log'``) are shown as ratios, exp(estimate) with exp(ci_low)-exp(ci_high); other rows
as differences on their own scale. Intercepts are not findings and are left out.
The wording is generated, the numbers come straight from the table (rounded by
:mod:`pipeline.report.numbers`), so a slide title can be checked against the CSV.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import pandas as pd

from pipeline.report import numbers as fmt

#: Readable names of the outcomes the models compare (others: underscores to spaces).
OUTCOME_LABELS: dict[str, str] = {
    "switches_per_hour": "switches per multi-platform hour",
    "switches": "switches",
    "compression_ratio": "arousal compression ratio",
    "arousal_range": "arousal range",
    "arousal_p95": "arousal peak (95th percentile)",
    "arousal_p05": "arousal trough (5th percentile)",
    "arousal_mean": "mean arousal",
    "scr_per_min": "SCRs per minute",
    "dwell_median_s": "median dwell time",
    "hr_mean_bpm": "mean heart rate",
    "multi_share": "multi-platform share of coded time",
    "multi_hours": "multi-platform hours",
    "media_hours": "media hours",
}

#: Units of the outcomes (shown after a difference); shares are shown in percentage points.
OUTCOME_UNITS: dict[str, str] = {
    "arousal_range": "z", "arousal_p95": "z", "arousal_p05": "z", "arousal_mean": "z",
    "compression_ratio": "", "scr_per_min": "SCRs/min", "hr_mean_bpm": "beats/min",
    "dwell_median_s": "s", "media_hours": "h", "multi_hours": "h", "coded_hours": "h",
}

_INTERCEPT = re.compile(r"^\(?(intercept|const|constant)\)?$", re.IGNORECASE)
#: Rows that describe the model, not an effect: variance components, correlations.
_NOT_EFFECT = re.compile(r"^(var|sd|cov|corr)\s*\(", re.IGNORECASE)
NOT_EFFECT_SCALES = frozenset({"variance", "correlation", "sd"})
# treatment coding: patsy's "x[T.b]" / "C(x)[T.b]", and the models stage's "x[b]"
_PATSY = re.compile(r"^(?:C\()?\s*([A-Za-z_][\w.]*)\s*(?:,[^\[]*)?\)?\[(?:T\.)?(.+)\]$")
_PLAIN = re.compile(r"^([A-Za-z_][\w.]*)\s*[:=]\s*(.+)$")


def _outcome_base(outcome: str) -> tuple[str, str | None]:
    """``dwell_median_s[screen]`` -> ("dwell_median_s", "screen")."""
    m = re.match(r"^(.+?)\[(.+)\]$", outcome)
    return (m.group(1), m.group(2)) if m else (outcome, None)


def outcome_label(outcome: str) -> str:
    base, qualifier = _outcome_base(outcome)
    label = OUTCOME_LABELS.get(base, base.replace("_", " "))
    return f"{label}, {qualifier}" if qualifier else label


def outcome_unit(outcome: str) -> tuple[str, float]:
    """(unit shown after a difference, factor applied to it): shares become points."""
    base, _ = _outcome_base(outcome)
    if base.endswith("_share") or base.endswith("_fraction"):
        return "percentage points", 100.0
    return OUTCOME_UNITS.get(base, ""), 1.0


def term_parts(term: str) -> list[tuple[str, str | None]]:
    """Split a model term into (variable, level) parts; interactions give several.

    ``cohort[T.teen]`` and ``C(cohort)[T.teen]`` (patsy treatment coding), ``cohort=teen``
    and ``cohort: teen`` give ``[("cohort", "teen")]``; ``age`` gives ``[("age", None)]``.
    """
    parts = []
    for piece in _split_interaction(term):
        m = _PATSY.match(piece) or _PLAIN.match(piece)
        parts.append((m.group(1), m.group(2).strip()) if m else (piece, None))
    return parts


def _split_interaction(term: str) -> list[str]:
    # split on ':' that are outside brackets (patsy interaction), keep 'cohort: x' whole
    pieces, depth, cur = [], 0, ""
    for ch in term:
        if ch in "[(":
            depth += 1
        elif ch in "])":
            depth -= 1
        if ch == ":" and depth == 0 and cur.rstrip().endswith("]"):
            pieces.append(cur.strip())
            cur = ""
            continue
        cur += ch
    pieces.append(cur.strip())
    return [p for p in pieces if p]


def is_intercept(term: str) -> bool:
    return bool(_INTERCEPT.match(str(term).strip()))


@dataclass(frozen=True)
class Effect:
    """One model term of comparisons.csv, with how it is shown."""

    outcome: str
    model: str
    term: str
    estimate: float
    ci_low: float
    ci_high: float
    p_value: float
    p_fdr: float
    n_participants: float
    n_obs: float
    ratio: bool
    converged: bool | None = None
    note: str = ""
    state_reference: str | None = None  # reference state of a model with state terms

    # shown values: ratios for log-scale rows, shares in percentage points
    def _show(self, x: float) -> float:
        if not fmt.is_num(x):
            return x
        return math.exp(x) if self.ratio else x * outcome_unit(self.outcome)[1]

    @property
    def unit(self) -> str:
        return "" if self.ratio else outcome_unit(self.outcome)[0]

    @property
    def shown(self) -> float:
        return self._show(self.estimate)

    @property
    def shown_low(self) -> float:
        return self._show(self.ci_low)

    @property
    def shown_high(self) -> float:
        return self._show(self.ci_high)

    @property
    def null_value(self) -> float:
        return 1.0 if self.ratio else 0.0

    @property
    def kind(self) -> str:
        if self.ratio:
            return "rate ratio" if "per_" in self.outcome or self.outcome == "switches" \
                else "ratio"
        return "difference"

    def cohort_level(self) -> str | None:
        parts = term_parts(self.term)
        if len(parts) == 1 and parts[0][0] == "cohort":
            return parts[0][1]
        return None

    def term_label(self, reference: str = "") -> str:
        """What the term compares, in words.

        In a model of outcome ~ cohort * state (treatment coding) the cohort term compares
        cohorts in the reference state, the state term compares states in the reference
        cohort, and their interaction compares the state difference between cohorts.
        """
        parts = dict((v, lv) for v, lv in term_parts(self.term))
        sref = self.state_reference
        vs_cohort = (f"{parts.get('cohort')} vs {reference}" if reference
                     else f"cohort {parts.get('cohort')}")
        if set(parts) == {"cohort"} and parts["cohort"] is not None:
            return vs_cohort + (f" in {sref}" if sref else "")
        if set(parts) == {"state"} and parts["state"] is not None and sref:
            return f"{parts['state']} vs {sref}" + (f" in {reference}" if reference else "")
        if set(parts) == {"cohort", "state"} and sref and None not in parts.values():
            return f"{parts['state']} − {sref} difference, {vs_cohort}"
        labels = []
        for var, level in term_parts(self.term):
            if level is None:
                labels.append(var.replace("_", " "))
            elif var == "cohort":
                labels.append(vs_cohort)
            else:
                labels.append(f"{var.replace('_', ' ')} {level}")
        return " × ".join(labels)

    def short_term_label(self) -> str:
        """The term without cohort names, for a chart that states the contrast once."""
        parts = dict((v, lv) for v, lv in term_parts(self.term))
        sref = self.state_reference
        if set(parts) == {"cohort"}:
            return "cohort" + (f", in {sref}" if sref else "")
        if set(parts) == {"state"} and sref:
            return f"{parts['state']} vs {sref}"
        if set(parts) == {"cohort", "state"} and sref:
            return f"cohort × ({parts['state']} − {sref})"
        return self.term_label()

    def label(self, reference: str = "") -> str:
        return f"{outcome_label(self.outcome)}: {self.term_label(reference)}"

    def number(self) -> str:
        """The headline number, e.g. ``rate ratio 1.42`` or ``difference 0.76 z``."""
        return f"{self.kind} {fmt.num(self.shown)}" + (f" {self.unit}" if self.unit else "")

    def interval_text(self) -> str:
        return f"95% CI {fmt.interval(self.shown_low, self.shown_high)}"

    @property
    def in_fdr_family(self) -> bool:
        """True where the models stage adjusted this p-value (it has a p_fdr)."""
        return fmt.is_num(self.p_fdr)

    def significant(self, q: float) -> bool:
        """Significant after FDR correction (False for terms outside the FDR family)."""
        return self.in_fdr_family and float(self.p_fdr) < q

    def statistics(self) -> str:
        bits = [self.interval_text(), fmt.p_value(self.p_value)]
        if fmt.is_num(self.p_fdr):
            bits.append("FDR-adjusted " + fmt.p_value(self.p_fdr))
        n = []
        if fmt.is_num(self.n_participants):
            n.append(fmt.plural(int(self.n_participants), "participant"))
        if fmt.is_num(self.n_obs):
            n.append(fmt.plural(int(self.n_obs), "observation"))
        if n:
            bits.append(", ".join(n))
        return "; ".join(bits)

    def claim(self, reference: str = "") -> str:
        """A short phrase with the number, for a slide title or a bullet.

        e.g. ``Switches per multi-platform hour: teen vs adult, rate ratio 1.42``.
        """
        what = outcome_label(self.outcome)
        return f"{what[:1].upper()}{what[1:]}: {self.term_label(reference)}, {self.number()}"

    def evidence(self, q: float, full_note: bool = True) -> str:
        """Interval, p-values, n and the verdict after FDR correction (and the model's
        note, in full or as a pointer to the comparisons table)."""
        if not self.in_fdr_family:
            verdict = "not part of the false-discovery-rate family (descriptive)"
        elif self.significant(q):
            verdict = f"holds after false-discovery-rate correction (q = {q:g})"
        else:
            verdict = f"not significant after false-discovery-rate correction (q = {q:g})"
        text = f"{self.statistics()}; {verdict}."
        if self.converged is False:
            text += " The model did not converge: treat this estimate with caution."
        if self.note:
            text += (f" Note: {self.note}." if full_note
                     else " The model has a note (see models/comparisons.csv in the appendix).")
        return text

    def sentence(self, reference: str, q: float) -> str:
        return f"{self.claim(reference)}; {self.evidence(q)}"


def _bool(v) -> bool | None:
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return None
    if isinstance(v, str):
        return {"true": True, "false": False}.get(v.strip().lower())
    return bool(v)


def is_effect_row(term: str, scale: str) -> bool:
    """False for intercepts, variance components and correlations."""
    term = str(term).strip()
    return not (is_intercept(term) or _NOT_EFFECT.match(term)
                or str(scale).strip().lower() in NOT_EFFECT_SCALES)


def _state_references(comparisons: pd.DataFrame) -> dict[tuple[str, str], str]:
    """Reference state of each (outcome, model) that has state terms."""
    from pipeline.types import STATES

    out = {}
    for (outcome, model), g in comparisons.groupby(["outcome", "model"], sort=False):
        levels = {lv for t in g["term"].astype(str) for v, lv in term_parts(t) if v == "state"}
        if levels:
            missing = [s for s in ("single", "none", "multi") if s in STATES and s not in levels]
            if missing:
                out[(str(outcome), str(model))] = missing[0]
    return out


def effects(comparisons: pd.DataFrame) -> list[Effect]:
    """Every effect row of comparisons.csv as an :class:`Effect`, in file order."""
    out = []
    state_refs = _state_references(comparisons)
    for row in comparisons.to_dict("records"):
        if not is_effect_row(row.get("term", ""), row.get("scale", "")):
            continue
        note = row.get("note")
        out.append(Effect(
            outcome=str(row["outcome"]), model=str(row["model"]), term=str(row["term"]),
            estimate=_f(row["estimate"]), ci_low=_f(row["ci_low"]), ci_high=_f(row["ci_high"]),
            p_value=_f(row["p_value"]), p_fdr=_f(row.get("p_fdr")),
            n_participants=_f(row.get("n_participants")), n_obs=_f(row.get("n_obs")),
            ratio=str(row.get("scale", "")).strip().lower() == "log",
            converged=_bool(row.get("converged")),
            note="" if note is None or (isinstance(note, float) and math.isnan(note))
            else str(note).strip(),
            state_reference=state_refs.get((str(row["outcome"]), str(row["model"]))),
        ))
    return [e for e in out if fmt.is_num(e.estimate)]


def _f(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return float("nan")


def _p_key(e: Effect) -> tuple[bool, float]:
    """Effects of the FDR family first (by adjusted p), then the others (by p)."""
    p = e.p_fdr if e.in_fdr_family else e.p_value
    return (not e.in_fdr_family, float(p) if fmt.is_num(p) else math.inf)


def primary_effect(all_effects: list[Effect], outcome: str = "switches_per_hour") -> Effect | None:
    """The cohort effect on ``outcome`` with the smallest p (the study's main question)."""
    cands = [e for e in all_effects if e.outcome == outcome and e.cohort_level() is not None]
    return min(cands, key=_p_key) if cands else None


def ranked(all_effects: list[Effect]) -> list[Effect]:
    """Primary (switch-rate cohort) effects first, then by FDR-adjusted p."""
    return sorted(all_effects, key=lambda e: (
        not (e.outcome == "switches_per_hour" and e.cohort_level() is not None), *_p_key(e)))


def effects_for(all_effects: list[Effect], words: tuple[str, ...]) -> list[Effect]:
    return [e for e in all_effects if any(w in e.outcome for w in words)]


def strongest(all_effects: list[Effect]) -> Effect | None:
    return min(all_effects, key=_p_key) if all_effects else None
