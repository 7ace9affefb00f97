"""roster.csv: one row per participant (CONTRACT §1).

``participant_id`` (unique, ID rule) and ``cohort`` are required; every other column
is kept as a covariate. A covariate column whose filled cells are all finite numbers
becomes numeric (whole numbers with no empty cell int64, else float with empty cells
NaN); any other stays text (empty cells missing).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.errors import ProblemCollector
from pipeline.ingest.cells import duplicated_rows, required_text
from pipeline.ingest.csvfile import CsvTable
from pipeline.ingest.ids import check_ids

REQUIRED = ["participant_id", "cohort"]


def _covariate(text: pd.Series) -> pd.Series:
    filled = text != ""
    numbers = pd.to_numeric(text.where(filled, None), errors="coerce")
    values = numbers[filled].to_numpy(dtype=float)
    if filled.any() and np.isfinite(values).all():
        if filled.all() and (values == np.round(values)).all() and (np.abs(values) < 2**53).all():
            return numbers.astype(np.int64)
        return numbers.astype(float)
    return text.where(filled, None)


def validate_roster(table: CsvTable, problems: ProblemCollector) -> pd.DataFrame:
    """Check the roster; return participant_id, cohort and the covariates.

    Problems are added to ``problems``; the returned frame holds the rows that passed.
    """
    ok = check_ids(table, "participant_id", problems, "participant ID")
    ok &= duplicated_rows(table, ["participant_id"], ok, problems, "participant",
                          hint="each participant has one roster row")
    ok &= required_text(table, "cohort", problems, "the cohort of every participant")
    frame = table.frame
    out = pd.DataFrame({"participant_id": frame["participant_id"], "cohort": frame["cohort"]})
    for name in frame.columns:
        if name not in REQUIRED:
            out[name] = _covariate(frame[name])
    return out[ok].reset_index(drop=True)
