"""The ID rule: participant and session IDs become file names, so they are restricted.

An ID is 1 to 64 characters from ``A-Z a-z 0-9 _ -`` (CONTRACT §1). Anything else
(spaces, slashes, dots, accents, an empty cell) is refused with the ID the user could
use instead.
"""

from __future__ import annotations

import re

import numpy as np

from pipeline.errors import ProblemCollector
from pipeline.ingest.cells import by_unique, report
from pipeline.ingest.csvfile import CsvTable

ID_PATTERN = r"[A-Za-z0-9_-]{1,64}"
_ID_RE = re.compile(ID_PATTERN)
ID_RULE = "1 to 64 characters from A-Z, a-z, 0-9, '_' and '-' (IDs become file names)"


def is_valid_id(value: str) -> bool:
    return bool(_ID_RE.fullmatch(value))


def suggest_id(value: str) -> str:
    """A valid ID close to ``value``: other characters become '_'."""
    cleaned = re.sub(r"[^A-Za-z0-9_-]", "_", value.strip())[:64]
    return cleaned or "p01"


def check_ids(table: CsvTable, column: str, problems: ProblemCollector, what: str) -> np.ndarray:
    """Mask of rows whose ``column`` holds a valid ID; the others become problems."""
    text = table.frame[column]
    empty = (text == "").to_numpy()
    good = by_unique(text, lambda u: u.str.fullmatch(ID_PATTERN).to_numpy(dtype=bool))
    report(table, column, empty, problems, f"is empty: every row needs a {what}",
           hint=f"a {what} is {ID_RULE}")
    for row in np.flatnonzero(~good & ~empty):
        value = text.iloc[row]
        length = f" ({len(value)} characters)" if len(value) > 64 else ""
        problems.add(table.label, f"is not a valid {what}{length}: allowed are {ID_RULE}",
                     line=int(table.lines[row]), column=column, value=value,
                     hint=f"e.g. {suggest_id(value)!r}")
    return good
