"""Read one study CSV file robustly, keeping every value as text.

Every table of a study folder goes through :func:`read_table`, which

* reads the bytes once and never writes (the user's files are left as they are);
* accepts UTF-8 with or without a byte-order mark, and UTF-16 with a byte-order mark
  (what some spreadsheet programs call "Unicode text");
* refuses binary files (Parquet, Excel workbooks, garbage) with a clear error;
* takes ``,`` as the separator unless the header line has no comma and has ``;`` or
  a tab, as spreadsheet programs in many locales write;
* strips spaces around column names and values, and drops blank lines;
* keeps every value as text, so each cell's type is checked later with its line
  number (the header is line 1; quoted values spanning lines are counted right).

Problems of the file as a whole (empty, header only, a required column missing, a
duplicated column name) are raised together as one :class:`InputError`.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.errors import InputError, ProblemCollector

UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
UTF8_BOM = b"\xef\xbb\xbf"

#: First bytes of binary forms users hand us by mistake, and what to tell them.
BINARY_SIGNATURES: dict[bytes, str] = {
    b"PAR1": "a Parquet file",
    b"PK\x03\x04": "a ZIP archive or an Excel/LibreOffice workbook",
    b"\xd0\xcf\x11\xe0": "an old Excel workbook (.xls)",
    b"\x1f\x8b": "a gzip-compressed file",
    b"%PDF": "a PDF document",
}


@dataclass
class CsvTable:
    """One CSV file's rows as text.

    ``frame`` has one column per header name (stripped), every value a ``str``
    ('' for empty); ``lines`` gives the line number of each row in the file as a text
    editor shows it; ``label`` is how messages name the file (relative to the study).
    """

    label: str
    path: Path
    frame: pd.DataFrame
    lines: np.ndarray
    separator: str
    header_line: int = 1

    def __len__(self) -> int:
        return len(self.frame)

    @property
    def columns(self) -> list[str]:
        return list(self.frame.columns)


def _decode(data: bytes, label: str) -> str:
    if data.startswith(UTF16_BOMS):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError:
            raise InputError(label, "starts with a UTF-16 byte-order mark but is not valid "
                             "UTF-16 text", hint="save the file as CSV UTF-8") from None
    for signature, what in BINARY_SIGNATURES.items():
        if data.startswith(signature):
            raise InputError(label, f"is not a text CSV file: it looks like {what}",
                             hint="export the table as CSV (comma-separated, UTF-8)")
    if b"\x00" in data:
        line = data[: data.index(b"\x00")].count(b"\n") + 1
        raise InputError(label, "is not a text CSV file: it holds binary data (NUL bytes)",
                         line=line,
                         hint="export the table as CSV (comma-separated, UTF-8)")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = data[: err.start].count(b"\n") + 1
        bad = data[err.start: err.start + 4]
        raise InputError(label, f"is not UTF-8 text (byte {bad[:1].hex()} cannot be read)",
                         line=line,
                         hint="save the file as CSV UTF-8 (most spreadsheet programs offer "
                         "it under 'Save as')") from None


def _first_line(text: str) -> str:
    """The first line holding more than spaces (the header), without splitting the file."""
    start = 0
    while True:
        ends = [i for i in (text.find("\n", start), text.find("\r", start)) if i >= 0]
        end = min(ends) if ends else len(text)
        line = text[start:end]
        if line.strip() or end >= len(text):
            return line
        start = end + 1


def _separator(header_line: str) -> str:
    if "," in header_line:
        return ","
    semis, tabs = header_line.count(";"), header_line.count("\t")
    if tabs and tabs >= semis:
        return "\t"
    if semis:
        return ";"
    return ","


def _physical_lines(text: str) -> int:
    crlf = text.count("\r\n")
    n = text.count("\n") + text.count("\r") - crlf
    if text and not text.endswith(("\n", "\r")):
        n += 1
    return n


def _record_start_lines(text: str, sep: str, n_records: int) -> np.ndarray:
    """1-based line on which each parsed record starts."""
    if _physical_lines(text) == n_records:
        return np.arange(1, n_records + 1)
    # Some quoted value spans lines: count them with the csv module (same dialect).
    starts = []
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    previous = 0
    try:
        for _ in reader:
            starts.append(previous + 1)
            previous = reader.line_num
    except csv.Error:
        starts = []
    if len(starts) == n_records:
        return np.asarray(starts)
    return np.arange(1, n_records + 1)


def _parse(text: str, sep: str, label: str) -> pd.DataFrame:
    try:
        return pd.read_csv(io.StringIO(text), sep=sep, header=None, dtype=str,
                           na_filter=False, skip_blank_lines=False, engine="c",
                           quotechar='"', doublequote=True)
    except pd.errors.EmptyDataError:
        raise InputError(label, "is empty", line=1,
                         hint="the first line must name the columns") from None
    except (pd.errors.ParserError, ValueError, OverflowError) as err:
        message = str(err)
        match = re.search(r"line (\d+)", message)
        line = int(match.group(1)) if match else None
        if "EOF inside string" in message:
            problem = "has a quote (\") that is never closed"
            hint = "values containing the separator or a quote are written \"like, this\""
        elif match:
            problem = f"has a row with more values than the header ({message.split('. ')[-1]})"
            hint = (f"every row needs as many {_sep_name(sep)}-separated values as the header; "
                    "quote values that contain the separator")
        else:
            problem = f"cannot be read as CSV ({message})"
            hint = "export the table as CSV (comma-separated, UTF-8)"
        raise InputError(label, problem, line=line, hint=hint) from None


def _strip(col: pd.Series) -> pd.Series:
    """Strip spaces around each value, once per distinct value."""
    codes, uniques = pd.factorize(col)
    stripped = np.asarray(pd.Index(uniques, dtype=object).str.strip(), dtype=object)
    return pd.Series(stripped[codes] if len(stripped) else col.to_numpy(), index=col.index,
                     dtype=object)


def _sep_name(sep: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab"}.get(sep, repr(sep))


def read_table(path: Path, label: str, required: list[str], *,
               allow_no_rows: bool = False) -> CsvTable:
    """Read ``path`` as a CSV table of text values.

    Parameters
    ----------
    path
        The file (only read).
    label
        How messages name the file, e.g. ``"media_log/coder_a.csv"``.
    required
        Columns that must be present (more are kept).
    allow_no_rows
        Accept a file with a header and no data rows (optional tables).

    Raises
    ------
    InputError
        Empty, binary, not UTF-8, malformed, header only (unless allowed), duplicated
        or missing columns; all problems of the header together.
    """
    try:
        data = path.read_bytes()
    except OSError as err:
        raise InputError(label, f"cannot be read ({err.strerror or err})") from None
    text = _decode(data, label)
    if not text.strip():
        raise InputError(label, "is empty", line=1,
                         hint=f"the first line must name the columns: {', '.join(required)}")
    sep = _separator(_first_line(text))
    raw = _parse(text, sep, label)
    starts = _record_start_lines(text, sep, len(raw))
    raw = raw.apply(_strip)
    blank = (raw[0] == "").to_numpy()
    if blank.any():  # rows whose first value is empty: blank only when all values are
        blank[blank] = (raw[blank] == "").all(axis=1).to_numpy()
    raw, starts = raw[~blank], starts[~blank]
    if raw.empty:  # only blank lines and spaces
        raise InputError(label, "is empty", line=1,
                         hint=f"the first line must name the columns: {', '.join(required)}")
    header_line = int(starts[0])
    names = [str(v).strip().lstrip("\ufeff").strip() for v in raw.iloc[0].tolist()]
    body = raw.iloc[1:].reset_index(drop=True)
    lines = starts[1:]
    body.columns = range(len(names))

    problems = ProblemCollector()
    keep: list[int] = []
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name == "":
            if (body[i] != "").any():
                row = int(np.flatnonzero((body[i] != "").to_numpy())[0])
                problems.add(label, f"column {i + 1} has no name in the header but holds values",
                             line=header_line, value=body[i].iloc[row],
                             hint="give every column a name on the first line")
            continue  # an unnamed, empty column (a trailing separator): ignored
        if name in seen:
            problems.add(label, f"names column {name!r} twice (columns {seen[name] + 1} and "
                         f"{i + 1})", line=header_line, column=name,
                         hint="each column name may appear once")
            continue
        seen[name] = i
        keep.append(i)
    missing_columns(label, list(seen), required, header_line, problems)
    problems.raise_if_any()

    frame = body[keep].copy()
    frame.columns = [names[i] for i in keep]
    frame = frame.reset_index(drop=True)
    if frame.empty and not allow_no_rows:
        raise InputError(label, "has a header but no data rows", line=header_line + 1,
                         hint="add at least one row under the header")
    return CsvTable(label=label, path=path, frame=frame, lines=np.asarray(lines, dtype=np.int64),
                    separator=sep, header_line=header_line)


def missing_columns(label: str, present: list[str], required: list[str], header_line: int,
                    problems: ProblemCollector, form: str | None = None) -> None:
    """Add a problem for each required column not in ``present``, with a close match."""
    for name in required:
        if name in present:
            continue
        close = difflib.get_close_matches(name.lower(), [n.lower() for n in present], n=1,
                                          cutoff=0.6)
        hint = f"columns found: {', '.join(present) or 'none'}"
        if close:
            original = next(n for n in present if n.lower() == close[0])
            hint = f"did you mean {original!r}? " + hint
        problems.add(label, f"has no column {name!r} (required{' for ' + form if form else ''}"
                     f": {', '.join(required)})", line=header_line, column=name, hint=hint)
