"""Per-cell checks of text columns: each bad cell becomes one problem with its line.

Every function takes a :class:`~pipeline.ingest.csvfile.CsvTable`, a column and a
:class:`~pipeline.errors.ProblemCollector`, adds a problem for each bad cell and
returns the parsed values with a mask of the rows that passed. Checks are vectorised;
only the bad rows are visited one by one to build their messages.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np
import pandas as pd

from pipeline.errors import ProblemCollector
from pipeline.ingest.csvfile import CsvTable

#: Integers above this cannot be a second of a session (about 285 million years);
#: they also lose precision as float64 (2**53).
MAX_INTEGER = 2**53


def distinct(text: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """(code of each row, the distinct values), so that ``values[codes]`` is ``text``.

    A categorical column (how big tables are read) already is this: its own compact
    codes and categories are used, which costs nothing. Other columns are factorized.
    """
    if isinstance(text.dtype, pd.CategoricalDtype):
        return text.cat.codes.to_numpy(), np.asarray(text.cat.categories, dtype=object)
    codes, uniques = pd.factorize(text)
    return codes, np.asarray(uniques, dtype=object)


def by_unique(text: pd.Series, fn: Callable[[pd.Series], Any]) -> np.ndarray:
    """Apply ``fn`` (vectorised, on a Series of the distinct values) and map back to rows.

    Study columns repeat few values (IDs, codes) or short ranges (seconds); working on
    the distinct values keeps per-string work small on logs of millions of rows.
    """
    codes, uniques = distinct(text)
    result = np.asarray(fn(pd.Series(uniques, dtype=object)))
    if len(result) == 0:
        return np.zeros(len(text), dtype=result.dtype)
    return result[codes]


def pair_codes(a: pd.Series, b: pd.Series) -> tuple[np.ndarray, list[tuple[Any, Any]]]:
    """Code each row's (a, b) pair: (index of the pair per row, the distinct pairs).

    The pairs are in no particular order.
    """
    ca, ua = distinct(a)
    cb, ub = distinct(b)
    nb = max(len(ub), 1)
    n_keys = max(len(ua), 1) * nb
    key = ca.astype(np.int32 if n_keys < 2**31 else np.int64)  # pair k = code_a * nb + code_b
    key *= nb
    key += cb
    if n_keys <= max(2**20, len(key)):  # few possible pairs: count them, no hashing needed
        held = np.bincount(key, minlength=n_keys) > 0
        combos = np.flatnonzero(held)
        inverse = (np.cumsum(held) - 1).astype(np.int32)[key]
    else:
        inverse, combos = pd.factorize(key)
    return inverse, [(ua[k // nb], ub[k % nb]) for k in combos]


def report(table: CsvTable, column: str, bad: np.ndarray, problems: ProblemCollector,
           problem: str, hint: str | None = None, values: pd.Series | None = None) -> None:
    """Add one problem per row where ``bad`` is True."""
    vals = table.frame[column] if values is None else values
    for row in np.flatnonzero(bad):
        problems.add(table.label, problem, line=int(table.lines[row]), column=column,
                     value=vals.iloc[row], hint=hint)


def required_text(table: CsvTable, column: str, problems: ProblemCollector,
                  what: str) -> np.ndarray:
    """Mask of rows where ``column`` is not empty; empty cells are problems."""
    empty = (table.frame[column] == "").to_numpy()
    report(table, column, empty, problems, f"is empty: {what} is required")
    return ~empty


def non_negative_integers(table: CsvTable, column: str, problems: ProblemCollector,
                          what: str) -> tuple[np.ndarray, np.ndarray]:
    """Parse whole non-negative numbers ('12', also '12.0' as spreadsheets write them).

    Returns (values as int64 with 0 where bad, mask of good rows).
    """
    # each distinct text is parsed once; rows take their value by code
    codes, uniques = distinct(table.frame[column])
    text = pd.Series(uniques, dtype=object)
    numbers = pd.to_numeric(text.where(text.str.fullmatch(r"[+]?[0-9]+(\.0*)?"), None),
                            errors="coerce").to_numpy(dtype=float)
    good_value = np.isfinite(numbers) & (numbers >= 0) & (numbers < MAX_INTEGER)
    good, empty = good_value[codes], (uniques == "")[codes]
    report(table, column, empty, problems, f"is empty: {what} is required",
           hint="a whole number of seconds, 0 or more")
    report(table, column, ~good & ~empty, problems,
           f"is not a whole number of seconds, 0 or more ({what})",
           hint="write whole seconds such as 0, 1, 2 (no decimals, signs or units)")
    values = np.where(good_value, numbers, 0).astype(np.int64)[codes]
    return values, good


def finite_numbers(table: CsvTable, column: str, problems: ProblemCollector,
                   what: str, hint: str | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Parse finite numbers (NaN, inf and text are problems).

    Returns (values as float64 with NaN where bad, mask of good rows).
    """
    text = table.frame[column]
    numbers = by_unique(text, lambda u: pd.to_numeric(
        u.str.replace(r"^\+", "", regex=True), errors="coerce").to_numpy(dtype=float))
    good = np.isfinite(numbers)
    empty = (text == "").to_numpy()
    report(table, column, empty, problems, f"is empty: {what} is required", hint=hint)
    report(table, column, ~good & ~empty, problems,
           f"is not a finite number ({what})", hint=hint or "write a number such as 12.5")
    return np.where(good, numbers, np.nan), good


def duplicated_rows(table: CsvTable, keys: list[str], mask: np.ndarray,
                    problems: ProblemCollector, what: str, hint: str | None = None) -> np.ndarray:
    """Flag rows (among ``mask``) whose ``keys`` repeat an earlier row; name that row.

    Returns the mask of rows that are not repeats.
    """
    sub = table.frame.loc[mask, keys]
    dup = sub.duplicated(keep=False).to_numpy()
    out = np.zeros(len(table), dtype=bool)
    if not dup.any():
        out[mask] = True
        return out
    positions = np.flatnonzero(mask)
    first_line: dict[tuple, int] = {}
    repeat = np.zeros(len(table), dtype=bool)
    for pos in positions[dup]:
        key = tuple(table.frame.iloc[pos][k] for k in keys)
        line = int(table.lines[pos])
        if key in first_line:
            repeat[pos] = True
            problems.add(table.label, f"repeats {what} {'/'.join(key)!r} of line "
                         f"{first_line[key]}", line=line, column=keys[-1],
                         value=table.frame.iloc[pos][keys[-1]], hint=hint)
        else:
            first_line[key] = line
    out[mask] = ~repeat[mask]
    return out
