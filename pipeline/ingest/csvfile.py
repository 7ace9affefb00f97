"""Read one study CSV file robustly, keeping every value as text.

Every table of a study folder goes through :func:`read_table`, which

* only reads, never writes (the user's files are left as they are);
* accepts UTF-8 with or without a byte-order mark, and UTF-16 with a byte-order mark
  (what some spreadsheet programs call "Unicode text");
* refuses binary files (Parquet, Excel workbooks, garbage) with a clear error;
* takes ``,`` as the separator unless the header line has no comma and has ``;`` or
  a tab, as spreadsheet programs in many locales write;
* strips spaces around column names and values, and drops blank lines;
* keeps every value as text, so each cell's type is checked later with its line
  number (the header is line 1; quoted values spanning lines are counted right);
* hands big tables over as categorical columns on request (``categorical=True``): a
  media log of millions of rows repeats a few IDs and codes, so each distinct value is
  stored, stripped and checked once.

Files are parsed by Arrow's CSV reader (fast, and it keeps each column's distinct
values once), in blocks of whole lines, so a big file never sits in memory whole.
Arrow is stricter or more lenient than the careful reader in a few corners (blank
lines, rows with too few values, quoted line breaks, a quote left open at the very
end, other encodings); a file that meets one of them is read again, whole, by pandas'
reader, which gives the line numbers and messages in every case. Both readers
give the same table for every file they both accept (tests/ingest/test_csvfile.py
checks this on many awkward files).

Problems of the file as a whole (empty, header only, a required column missing, a
duplicated column name) are raised together as one :class:`InputError`.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, Iterator

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

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
    ('' for empty), held as ``object`` columns or, when read with ``categorical=True``,
    as pandas categoricals of the same strings; ``lines`` gives the line number of each row in the file as a text
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


def _refuse_binary(data: bytes, label: str) -> None:
    """Refuse Parquet, workbooks, archives and other bytes that are not text."""
    for signature, what in BINARY_SIGNATURES.items():
        if data.startswith(signature):
            raise InputError(label, f"is not a text CSV file: it looks like {what}",
                             hint="export the table as CSV (comma-separated, UTF-8)")
    if b"\x00" in data:
        line = data[: data.index(b"\x00")].count(b"\n") + 1
        raise InputError(label, "is not a text CSV file: it holds binary data (NUL bytes)",
                         line=line,
                         hint="export the table as CSV (comma-separated, UTF-8)")


def _decode(data: bytes, label: str) -> str:
    if data.startswith(UTF16_BOMS):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError:
            raise InputError(label, "starts with a UTF-16 byte-order mark but is not valid "
                             "UTF-16 text", hint="save the file as CSV UTF-8") from None
    _refuse_binary(data, label)
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


def _physical_lines(text: str | bytes, start: int = 0, end: int | None = None) -> int:
    """Lines as a text editor counts them (``\n``, ``\r\n`` or a lone ``\r`` end one),
    in ``text[start:end]`` (counted in place: a big block is not copied)."""
    end = len(text) if end is None else end
    nl, cr = ("\n", "\r") if isinstance(text, str) else (b"\n", b"\r")
    n_cr = text.count(cr, start, end)
    n = text.count(nl, start, end) + n_cr - (text.count(cr + nl, start, end) if n_cr else 0)
    if end > start and not text.endswith((nl, cr), start, end):
        n += 1
    return n


@dataclass
class _Records:
    """Every record of a file (header and blank lines included), column by column.

    The values of column ``i`` are ``values[i][codes[i]]``: each distinct value is held
    once, already stripped; ``lines`` is the line on which each record starts.
    """

    codes: list[np.ndarray]
    values: list[np.ndarray]  # object arrays of distinct str
    lines: np.ndarray
    separator: str


def line_numbers(n: int) -> np.ndarray:
    """Lines 1 to ``n``, as int32 (half the memory of int64) unless ``n`` does not fit."""
    return np.arange(1, n + 1, dtype=np.int32 if n < np.iinfo(np.int32).max else np.int64)


def _stripped(codes: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Strip spaces around each distinct value; values equal once stripped are merged."""
    stripped = np.asarray([v.strip() for v in values], dtype=object)
    if len(stripped) == 0 or (stripped == values).all():
        return codes, values
    remap, distinct = pd.factorize(stripped)
    return remap.astype(np.int32)[codes], np.asarray(distinct, dtype=object)


# ------------------------------------------------------------------ careful reader
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


def _pandas_csv(text: str, sep: str) -> pd.DataFrame:
    """Every record of ``text`` as text, blank lines included (pandas' C reader)."""
    return pd.read_csv(io.StringIO(text), sep=sep, header=None, dtype=str, na_filter=False,
                       skip_blank_lines=False, engine="c", quotechar='"', doublequote=True)


def _parse(text: str, sep: str, label: str) -> pd.DataFrame:
    try:
        return _pandas_csv(text, sep)
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


def _careful_records(data: bytes, label: str, required: list[str]) -> _Records:
    """Read any file pandas' reader takes, with exact line numbers and messages."""
    text = _decode(data, label)
    if not text.strip():
        raise InputError(label, "is empty", line=1,
                         hint=f"the first line must name the columns: {', '.join(required)}")
    sep = _separator(_first_line(text))
    raw = _parse(text, sep, label)
    lines = _record_start_lines(text, sep, len(raw))
    del text
    codes, values = [], []
    for i in raw.columns:
        c, v = pd.factorize(raw[i])
        c, v = _stripped(c.astype(np.int32), np.asarray(v, dtype=object))
        codes.append(c)
        values.append(v)
    return _Records(codes, values, lines, sep)


# -------------------------------------------------------------------- Arrow reader
#: Arrow keeps each distinct value of a column once (a dictionary) while it parses.
_TEXT = pa.dictionary(pa.int32(), pa.string())
#: Arrow's memory for reading comes from malloc, like numpy's: what Arrow frees after a
#: read is reused for the arrays built from it (Arrow's default pool keeps freed memory
#: for itself, which only adds to the peak).
_POOL = pa.system_memory_pool()
#: Bytes decoded at a time to check that a non-ASCII file is UTF-8 (bounds the memory).
_UTF8_CHUNK = 1 << 20
#: Bytes of a file parsed at a time by the Arrow reader. A file is read block by block
#: (each cut after its last line break), so a big media log never sits in memory
#: whole, as bytes or as Arrow arrays: only one block and each column's codes do.
BLOCK_BYTES = 16 << 20


def _is_utf8(data: bytes, start: int, end: int | None = None) -> bool:
    """Whether ``data[start:end]`` is UTF-8 as Python reads it (ASCII is checked in one pass)."""
    view = memoryview(data)[start:end]
    if not len(view) or int(np.frombuffer(view, dtype=np.uint8).max()) < 0x80:
        return True
    decoder = codecs.getincrementaldecoder("utf-8")()
    try:
        for i in range(0, len(view), _UTF8_CHUNK):
            decoder.decode(view[i: i + _UTF8_CHUNK])
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return False
    return True


def _last_line_agrees(data: bytes, start: int, end: int, sep: str, last: list[str]) -> bool:
    """Whether pandas reads the last line of ``data[start:end]`` as Arrow read its last
    record.

    Arrow accepts a quote left open on the last line (the value runs to the end of the
    block); the careful reader refuses it at the end of a file, and a quoted value that
    runs on into the next block is not for the block-wise reader either.
    """
    stop = end
    for ending in (b"\r\n", b"\n", b"\r"):
        if data.endswith(ending, start, end):
            stop -= len(ending)
            break
    begin = max(data.rfind(b"\n", start, stop), data.rfind(b"\r", start, stop), start - 1) + 1
    try:
        row = _pandas_csv(data[begin:end].decode("utf-8"), sep)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError, OverflowError):
        return False
    return row.shape == (1, len(last)) and row.iloc[0].tolist() == last


def _blocks(fh: BinaryIO, block_bytes: int) -> Iterator[tuple[bytes, int]]:
    """The file in blocks of whole lines: ``(data, end)``, the block being
    ``data[:end]`` (cut after its last ``\n``; the last block is whatever remains). What
    follows the cut is read again with the next block, so no block is copied. A line
    longer than a block makes a longer block."""
    while True:
        data = fh.read(block_bytes)
        if not data:
            return
        end = data.rfind(b"\n") + 1
        while end == 0:  # no line break yet: a long line, or the end of the file
            more = fh.read(block_bytes)
            if not more:
                end = len(data)
                break
            data += more
            end = data.rfind(b"\n") + 1
        if end < len(data):
            fh.seek(end - len(data), io.SEEK_CUR)
        yield data, end
        del data  # before the next block is read


class _Distinct:
    """One column's distinct values across blocks, and each record's code into them."""

    def __init__(self) -> None:
        self.index: dict[str, int] = {}
        self.parts: list[np.ndarray] = []

    def add(self, column: pa.ChunkedArray) -> None:
        column = column.unify_dictionaries(_POOL)  # one dictionary for the block
        if not column.num_chunks:
            return
        values = column.chunks[0].dictionary.to_pylist()
        index = self.index
        mapping = np.fromiter((index.setdefault(v, len(index)) for v in values),
                              dtype=np.int32, count=len(values))
        # the smallest integer type that holds every code so far (np.concatenate widens)
        mapping = mapping.astype(np.min_scalar_type(max(len(index) - 1, 0)))
        for chunk in column.chunks:
            self.parts.append(mapping[chunk.indices.to_numpy()])

    def codes_and_values(self) -> tuple[np.ndarray, np.ndarray]:
        codes = np.concatenate(self.parts) if self.parts else np.zeros(0, dtype=np.int32)
        self.parts = []
        values = np.empty(len(self.index), dtype=object)
        values[:] = list(self.index)
        return _stripped(codes, values)


def _arrow_records(fh: BinaryIO, label: str, block_bytes: int = BLOCK_BYTES
                   ) -> _Records | None:
    """Parse a plain CSV file with Arrow, block by block: every record, or None.

    Arrow's reader runs on the threads Arrow is allowed (``pyarrow.set_cpu_count``,
    which the runner sets). None is returned for other encodings than UTF-8, blank
    lines, quoted line breaks, rows of another length than the header, NUL bytes past
    the first block and anything Arrow refuses: the careful reader then reads the file
    and explains any problem.
    """
    blocks = _blocks(fh, block_bytes)
    first, end = next(blocks, (b"", 0))
    if first.startswith(UTF16_BOMS):
        return None
    _refuse_binary(first, label)  # it starts the file: a NUL's line is counted right
    start = len(UTF8_BOM) if first.startswith(UTF8_BOM) else 0
    if first.startswith(UTF8_BOM, start):
        return None  # a second byte-order mark (Arrow would drop it too)
    ends = [i for i in (first.find(b"\n", start, end), first.find(b"\r", start, end))
            if i >= 0]
    header = first[start: min(ends) if ends else end]
    if not _is_utf8(header, 0) or not header.decode("utf-8").strip():
        return None  # not UTF-8, or leading blank lines, or an empty file
    header = header.decode("utf-8")
    sep = _separator(header)
    try:
        names = [f"f{i}" for i in range(len(next(csv.reader([header], delimiter=sep))))]
    except csv.Error:
        return None
    columns = [_Distinct() for _ in names]
    n_records = 0
    block, offset = first, start
    del first
    while block is not None:
        if block.find(b"\x00", offset, end) >= 0 or not _is_utf8(block, offset, end):
            return None  # the careful reader names the line
        if block.startswith(UTF8_BOM, offset):
            return None  # a line starting with U+FEFF: Arrow would drop it at a block's start
        quoted = block.find(b'"', offset, end) >= 0
        try:
            table = pa_csv.read_csv(
                pa.py_buffer(block)[offset:end], memory_pool=_POOL,
                read_options=pa_csv.ReadOptions(column_names=names, use_threads=True),
                parse_options=pa_csv.ParseOptions(
                    delimiter=sep, quote_char='"', double_quote=True, escape_char=False,
                    newlines_in_values=quoted, ignore_empty_lines=True),
                convert_options=pa_csv.ConvertOptions(
                    column_types={name: _TEXT for name in names}, check_utf8=False,
                    null_values=[], strings_can_be_null=False,
                    quoted_strings_can_be_null=False))
        except pa.ArrowException:
            return None
        # Arrow skips blank lines and joins quoted line breaks: then records and lines
        # differ and the careful reader counts the lines.
        if table.num_rows != _physical_lines(block, offset, end):
            return None
        if quoted and not _last_line_agrees(block, offset, end, sep,
                                            [column[-1].as_py() for column in table.columns]):
            return None
        n_records += table.num_rows
        for distinct, column in zip(columns, table.columns):
            distinct.add(column)
        del table, block
        block, end = next(blocks, (None, 0))
        offset = 0
    codes, values = [], []
    for distinct in columns:
        c, v = distinct.codes_and_values()
        codes.append(c)
        values.append(v)
    return _Records(codes, values, line_numbers(n_records), sep)


# ------------------------------------------------------------------------ the table
def _sep_name(sep: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab"}.get(sep, repr(sep))


def _read_records(path: Path, label: str, required: list[str]) -> _Records:
    try:
        with open(path, "rb") as fh:
            records = _arrow_records(fh, label)
        if records is not None:
            return records
        data = path.read_bytes()
    except OSError as err:
        raise InputError(label, f"cannot be read ({err.strerror or err})") from None
    return _careful_records(data, label, required)


def present_only(codes: np.ndarray, values: np.ndarray) -> pd.Categorical:
    """The categorical of ``values[codes]`` whose categories are the values present.

    (Counting codes is much cheaper than pandas' ``remove_unused_categories``, which
    sorts them.)
    """
    used = np.bincount(codes, minlength=len(values)) > 0
    if not used.all():
        remap = np.cumsum(used) - 1  # a value's position among those present
        # in the smallest integer type that holds them, as the categorical keeps them
        codes = remap.astype(np.min_scalar_type(max(int(used.sum()) - 1, 0)))[codes]
        values = values[used]
    return pd.Categorical.from_codes(codes, pd.Index(values, dtype=object))


def _column(codes: np.ndarray, values: np.ndarray, categorical: bool):
    if categorical:
        return present_only(codes, values)
    return values[codes] if len(values) else np.zeros(len(codes), dtype=object)


def read_table(path: Path, label: str, required: list[str], *,
               allow_no_rows: bool = False, categorical: bool = False) -> CsvTable:
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
    categorical
        Give the frame's columns as pandas categoricals (the same strings, each
        distinct value held once) instead of ``object`` columns: for big tables.

    Raises
    ------
    InputError
        Empty, binary, not UTF-8, malformed, header only (unless allowed), duplicated
        or missing columns; all problems of the header together.
    """
    records = _read_records(path, label, required)
    codes, values, sep = records.codes, records.values, records.separator
    n = len(records.lines)
    # Records whose values are all empty are blank lines (or only separators): dropped.
    blank = np.ones(n, dtype=bool)
    for c, v in zip(codes, values):
        empty = np.flatnonzero(v == "")
        if not len(empty):
            blank[:] = False
            break
        blank &= c == empty[0]
    if n and not blank.any():  # the usual case: no index of every row, no copies
        first, body = 0, slice(1, None)
    else:
        kept = np.flatnonzero(~blank)
        if not len(kept):  # only blank lines and spaces
            raise InputError(label, "is empty", line=1,
                             hint=f"the first line must name the columns: {', '.join(required)}")
        first, body = int(kept[0]), kept[1:]
    del blank
    header_line = int(records.lines[first])
    names = [str(v[c[first]]).strip().lstrip("\ufeff").strip() for c, v in zip(codes, values)]
    lines = records.lines[body]

    problems = ProblemCollector()
    keep: list[int] = []
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name == "":
            filled = np.flatnonzero((values[i] != "")[codes[i][body]])
            if len(filled):
                problems.add(label, f"column {i + 1} has no name in the header but holds values",
                             line=header_line, value=values[i][codes[i][body][filled[0]]],
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

    columns = {}
    for i in keep:
        columns[names[i]] = _column(codes[i][body], values[i], categorical)
        codes[i] = None  # done with: keeps the memory of one column at a time
    frame = pd.DataFrame(columns, index=pd.RangeIndex(len(lines)))
    if frame.empty and not allow_no_rows:
        raise InputError(label, "has a header but no data rows", line=header_line + 1,
                         hint="add at least one row under the header")
    return CsvTable(label=label, path=path, frame=frame, lines=lines,
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
