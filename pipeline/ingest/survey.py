"""survey.csv (optional): self-report items, one row per participant and item.

``participant_id`` (in the roster), ``item`` (text) and ``value`` (a finite number,
within ``[survey] scale_min`` / ``scale_max`` when set). When ``[survey] items`` is
set, rows of other items are left out with a warning, and a listed item that no row
holds is an error (usually a typo).
"""

from __future__ import annotations

import difflib

import numpy as np
import pandas as pd

from pipeline.config import SurveySettings
from pipeline.errors import ProblemCollector
from pipeline.ingest.cells import duplicated_rows, finite_numbers, report, required_text
from pipeline.ingest.csvfile import CsvTable

REQUIRED = ["participant_id", "item", "value"]


def validate_survey(table: CsvTable, participants: set[str], cfg: SurveySettings,
                    problems: ProblemCollector, warnings: list[str],
                    config_label: str = "[survey] items") -> pd.DataFrame:
    """Check survey.csv; return participant_id, item, value (float)."""
    frame = table.frame
    known = frame["participant_id"].isin(participants).to_numpy()
    report(table, "participant_id", ~known, problems, "is not a participant of roster.csv",
           hint="survey rows belong to roster participants")
    ok = known & required_text(table, "item", problems, "the item name")
    value, good = finite_numbers(table, "value", problems, "the response",
                                 hint="a number on the item's scale")
    ok &= good
    scale = ""
    if cfg.scale_min is not None or cfg.scale_max is not None:
        low = -np.inf if cfg.scale_min is None else cfg.scale_min
        high = np.inf if cfg.scale_max is None else cfg.scale_max
        scale = f"{cfg.scale_min if cfg.scale_min is not None else '-inf'} to " \
                f"{cfg.scale_max if cfg.scale_max is not None else 'inf'}"
        outside = good & ((value < low) | (value > high))
        report(table, "value", outside, problems,
               f"is outside the scale ([survey] scale_min/scale_max: {scale})",
               hint="correct the response or the scale in study.toml")
        ok &= ~outside
    ok &= duplicated_rows(table, ["participant_id", "item"], ok, problems,
                          "participant and item", hint="one response per participant and item")
    out = pd.DataFrame({"participant_id": frame["participant_id"], "item": frame["item"],
                        "value": value})[ok].reset_index(drop=True)
    if cfg.items:
        seen = set(frame["item"][frame["item"] != ""])
        for item in cfg.items:
            if item not in seen:
                close = difflib.get_close_matches(item, sorted(seen), n=1)
                problems.add(table.label, f"has no row of item {item!r} named in "
                             f"{config_label}", column="item", value=item,
                             hint=(f"did you mean {close[0]!r}? " if close else "")
                             + f"items in the file: {', '.join(sorted(seen)) or 'none'}")
        other = sorted(seen - set(cfg.items))
        if other:
            warnings.append(f"{table.label}: items not in [survey] items left out: "
                            f"{', '.join(other)}")
        out = out[out["item"].isin(cfg.items)].reset_index(drop=True)
    return out
