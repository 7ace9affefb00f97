"""Checks made before a model is fitted; each failure is one readable sentence.

A guard never raises for a property of the data (one cohort, thin cohorts): it
returns the sentence, the stage writes a not-fitted row with it as the note and puts
it in the summary. Settings that name something that does not exist are a
:class:`~pipeline.errors.ConfigError`, since only the user can fix them.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from pipeline.config import CohortSettings
from pipeline.errors import ConfigError


@dataclass(frozen=True)
class CohortPlan:
    """The cohorts compared and the reference, or why there is no comparison."""

    cohorts: list[str]
    reference: str | None
    problem: str | None = None


def plan_cohorts(seen: list[str], roster_cohorts: list[str],
                 cfg: CohortSettings) -> CohortPlan:
    """Cohorts to compare (sorted, reference first) from those seen in the data.

    ``seen``: cohorts with at least one usable session; ``roster_cohorts``: every
    cohort of the roster (settings are checked against these).
    """
    known = sorted(set(roster_cohorts) | set(seen))
    for name in [*cfg.include, *([cfg.reference] if cfg.reference else [])]:
        if name not in known:
            raise ConfigError(
                f"[cohorts] names cohort {name!r}, which is not a cohort of this study",
                hint=f"cohorts in the roster: {', '.join(known) or '(none)'}")
    chosen = sorted(c for c in set(seen) if not cfg.include or c in cfg.include)
    if cfg.reference is not None:
        reference = cfg.reference
    else:
        pool = sorted(cfg.include) if cfg.include else known
        reference = next((c for c in pool if c in chosen), pool[0] if pool else None)
    if reference not in chosen:
        label = reference if reference is not None else "(none)"
        return CohortPlan(chosen, reference,
                          f"no cohort comparison: the reference cohort {label} has no "
                          "usable sessions")
    if len(chosen) < 2:
        only = chosen[0] if chosen else "(none)"
        return CohortPlan(chosen, reference,
                          f"no cohort comparison: only one cohort ({only}) has usable "
                          "sessions; at least two are needed")
    ordered = [reference] + [c for c in chosen if c != reference]
    return CohortPlan(ordered, reference)


def participants_per_cohort(data: pd.DataFrame, cohorts: list[str]) -> dict[str, int]:
    counts = data.groupby("cohort")["participant_id"].nunique()
    return {c: int(counts.get(c, 0)) for c in cohorts}


def too_few_participants(data: pd.DataFrame, cohorts: list[str],
                         minimum: int) -> str | None:
    """Sentence naming the cohorts below ``minimum`` participants with data, or None."""
    counts = participants_per_cohort(data, cohorts)
    thin = [f"{c} has {n}" for c, n in counts.items() if n < minimum]
    if not thin:
        return None
    return (f"not fitted: too few participants with data ({'; '.join(thin)}; at least "
            f"{minimum} per cohort needed, [cohorts] min_participants)")
