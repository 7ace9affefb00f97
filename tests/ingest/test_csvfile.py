"""Robust CSV reading: encodings, separators, line numbers and whole-file refusals."""

from __future__ import annotations

import io
import random

import numpy as np
import pandas as pd
import pytest
from ingest_builders import ROSTER, assert_names, load, refusal, write_study

from pipeline.errors import InputError
from pipeline.ingest import csvfile
from pipeline.ingest.csvfile import read_table


def _read(tmp_path, data: bytes, required=("participant_id", "cohort"), **kw):
    path = tmp_path / "roster.csv"
    path.write_bytes(data)
    return read_table(path, "roster.csv", list(required), **kw)


def test_plain_utf8_and_bom_read_the_same(tmp_path):
    plain = _read(tmp_path, ROSTER.encode())
    bom = _read(tmp_path, b"\xef\xbb\xbf" + ROSTER.encode())
    assert bom.columns == plain.columns == ["participant_id", "cohort", "birth_year",
                                            "household_id"]
    assert bom.frame.equals(plain.frame)


def test_utf16_with_bom_is_read(tmp_path):
    table = _read(tmp_path, ROSTER.encode("utf-16"))
    assert table.frame["participant_id"].tolist() == ["p01", "p02"]


@pytest.mark.parametrize("sep", [";", "\t"])
def test_semicolon_and_tab_separators_are_detected(tmp_path, sep):
    text = ROSTER.replace(",", sep)
    table = _read(tmp_path, text.encode())
    assert table.separator == sep
    assert table.frame["cohort"].tolist() == ["alpha", "beta"]


def test_values_and_names_are_stripped_and_kept_as_text(tmp_path):
    table = _read(tmp_path, b" participant_id , cohort ,birth_year\n p01 , alpha ,1990\n")
    assert table.columns == ["participant_id", "cohort", "birth_year"]
    assert table.frame.iloc[0].tolist() == ["p01", "alpha", "1990"]


def test_line_numbers_count_blank_lines_and_quoted_newlines(tmp_path):
    data = b'participant_id,cohort,note\np01,alpha,"two\nlines"\n\np02,beta,x\r\n'
    table = _read(tmp_path, data)
    # header line 1; p01 starts on line 2 and its note ends on line 3; line 4 is blank
    assert table.lines.tolist() == [2, 5]


def test_crlf_line_numbers(tmp_path):
    table = _read(tmp_path, b"participant_id,cohort\r\np01,a\r\np02,b\r\n")
    assert table.lines.tolist() == [2, 3]


@pytest.mark.parametrize("data", [b"", b"   \n\n"])
def test_empty_file_is_refused(tmp_path, data):
    with pytest.raises(InputError) as info:
        _read(tmp_path, data)
    assert_names(info.value, "roster.csv", 1, None, None, says="is empty")


def test_header_only_is_refused_unless_allowed(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, b"participant_id,cohort\n")
    assert_names(info.value, "roster.csv", 2, None, None, says="no data rows")
    assert len(_read(tmp_path, b"participant_id,cohort\n", allow_no_rows=True)) == 0


def test_missing_required_column_names_it_and_suggests(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, b"Participant_ID,group\np01,a\n")
    assert_names(info.value, "roster.csv", 1, "participant_id", None,
                 says="did you mean 'Participant_ID'")
    assert_names(info.value, "roster.csv", 1, "cohort", None, says="has no column 'cohort'")


def test_duplicated_column_name_is_refused(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, b"participant_id,cohort,cohort\np01,a,b\n")
    assert_names(info.value, "roster.csv", 1, "cohort", None, says="twice")


def test_unnamed_empty_trailing_column_is_ignored_but_unnamed_data_is_not(tmp_path):
    assert _read(tmp_path, b"participant_id,cohort,\np01,a,\n").columns == [
        "participant_id", "cohort"]
    with pytest.raises(InputError) as info:
        _read(tmp_path, b"participant_id,cohort,\np01,a,x\n")
    assert_names(info.value, "roster.csv", 1, None, "x", says="has no name")


@pytest.mark.parametrize("data,what", [
    (b"participant_id,cohort\np01,a\x00\x01\n", "binary data"),
    (b"PAR1\x00\x00garbage", "Parquet"),
    (b"PK\x03\x04zipped", "workbook"),
])
def test_binary_files_are_refused(tmp_path, data, what):
    with pytest.raises(InputError) as info:
        _read(tmp_path, data)
    assert what in info.value.render()
    assert info.value.problems[0].file == "roster.csv"


def test_not_utf8_names_the_line(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, "participant_id,cohort\np01,a\np02,caf\xe9\n".encode("latin-1"))
    assert_names(info.value, "roster.csv", 3, None, None, says="not UTF-8")


def test_row_with_too_many_values_names_the_line(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, b"participant_id,cohort\np01,a\np02,b,extra\n")
    assert_names(info.value, "roster.csv", 3, None, None, says="more values than the header")


def test_unclosed_quote_is_refused(tmp_path):
    with pytest.raises(InputError) as info:
        _read(tmp_path, b'participant_id,cohort\np01,"a\np02,b\n')
    assert "never closed" in info.value.render()


def test_semicolon_study_loads_end_to_end(tmp_path):
    write_study(tmp_path, roster=ROSTER.replace(",", ";"))
    assert load(tmp_path).roster["participant_id"].tolist() == ["p01", "p02"]


def test_missing_roster_and_sessions_are_reported_together(tmp_path):
    write_study(tmp_path, roster=None, sessions=None)
    err = refusal(tmp_path)
    assert {p.file for p in err.problems} == {"roster.csv", "sessions.csv"}


# ------------------------------------------- Arrow reader against the careful reader
def _arrow(data: bytes, label: str = "f.csv", block_bytes: int = csvfile.BLOCK_BYTES):
    return csvfile._arrow_records(io.BytesIO(data), label, block_bytes)


def _both_readers(data: bytes, block_bytes: int = csvfile.BLOCK_BYTES):
    """(Arrow's records or None where it hands over, the careful reader's records or error)."""
    fast = _arrow(data, block_bytes=block_bytes)
    try:
        careful = csvfile._careful_records(data, "f.csv", ["h"])
    except InputError as err:
        careful = err
    return fast, careful


def _rows(records) -> list[list[str]]:
    return [list(v[c]) for c, v in zip(records.codes, records.values)]


FIELDS = ["a", "", " ", '"a"', '"a,b"', '"a""b"', 'a"b', '"a"b', '"a" ', ' "a"', '"', '""',
          '"""', '"a\nb"', '"a\r\nb"', "x;y", '"x;y"', "\t", "\u00e9", "\ufeff", '"a"b"c"',
          '"a""', "1.0", "\\\"", "\u3000", "\xa0"]


def test_arrow_reads_every_file_it_accepts_as_the_careful_reader_does():
    # Random small files of awkward fields, separators, line endings and blank lines:
    # where Arrow reads a file, the careful reader reads the same values on the same
    # lines (so messages and line numbers cannot depend on which reader ran).
    rng = random.Random(11)
    accepted = 0
    for _ in range(3000):
        sep = rng.choice([",", ",", ";", "\t"])
        n_cols, n_rows = rng.randrange(1, 4), rng.randrange(1, 5)
        newline = rng.choice(["\n", "\r\n", "\r"])
        rows = [sep.join(rng.choice(FIELDS) for _ in range(n_cols)) for _ in range(n_rows)]
        text = sep.join(["h"] * n_cols) + newline + newline.join(rows)
        text += rng.choice([newline, "", newline + newline])
        data = text.encode(rng.choice(["utf-8", "utf-8", "utf-8-sig"]))
        # whole files, and files cut into blocks of a few bytes (a block ends after a
        # line break, so many blocks are one or two lines)
        block_bytes = rng.choice([csvfile.BLOCK_BYTES, 1, 2, 5, 11])
        try:
            fast, careful = _both_readers(data, block_bytes)
        except InputError:
            continue  # binary: both readers refuse it the same way (_refuse_binary)
        if fast is None:
            continue
        accepted += 1
        assert not isinstance(careful, InputError), (text, careful.render())
        assert _rows(fast) == _rows(careful), text
        assert fast.lines.tolist() == careful.lines.tolist(), text
        assert fast.separator == careful.separator
    assert accepted > 500  # most files are plain enough for Arrow


@pytest.mark.parametrize("data", [
    b'participant_id,cohort\np01,"a',  # a quote left open on the last line ...
    b'participant_id,cohort\np01,"a\n',  # ... with or without the line break after it
    b'participant_id,cohort\np01,a\n\np02,b\n',  # a blank line
    b'participant_id,cohort\np01,"a\nb"\n',  # a quoted line break
    b'participant_id,cohort\np01\n',  # a short row
    b'\n\nparticipant_id,cohort\np01,a\n',  # blank lines before the header
    b'participant_id,cohort\np01,caf\xe9\n',  # not UTF-8
    b'\xef\xbb\xbf\xef\xbb\xbfparticipant_id,cohort\np01,a\n',  # two byte-order marks
    "participant_id,cohort\np01,a\n".encode("utf-16"),
])
def test_arrow_hands_unusual_files_to_the_careful_reader(data):
    assert _arrow(data, "roster.csv") is None
    assert _arrow(data, "roster.csv", block_bytes=4) is None


def test_quoted_line_break_across_blocks_is_read_by_the_careful_reader(tmp_path):
    data = b'participant_id,cohort\np01,"a\nb"\np02,b\n'
    assert _arrow(data, "roster.csv", block_bytes=24) is None
    table = _read(tmp_path, data)
    assert table.frame["cohort"].tolist() == ["a\nb", "b"]
    assert table.lines.tolist() == [2, 4]


@pytest.mark.parametrize("data", [
    b'participant_id,cohort\np01,a\np02,b\x00\n',  # a NUL byte past the first block
    b'participant_id,cohort\np01,a\np02,caf\xe9\n',  # not UTF-8 past the first block
    b'participant_id,cohort\np01,a\np02,b,c\n',  # a long row past the first block
])
def test_problems_past_the_first_block_go_to_the_careful_reader(tmp_path, data):
    assert _arrow(data, "roster.csv", block_bytes=24) is None
    with pytest.raises(InputError):  # and it names them
        _read(tmp_path, data)


def test_blocks_end_after_a_line_break():
    data = b"h1,h2\r\na,b\r\nc,d\re,f\n" + b"x" * 30 + b"\ng,h"
    blocks = [block[:end] for block, end in csvfile._blocks(io.BytesIO(data), 8)]
    assert b"".join(blocks) == data
    assert all(b.endswith(b"\n") for b in blocks[:-1])
    assert b"x" * 30 + b"\n" in blocks  # a line longer than a block is one block


def test_many_blocks_give_one_dictionary_per_column(tmp_path):
    # 3000 rows in blocks of about 200 bytes: each column's distinct values are held
    # once, and codes of every block point into them
    rows = [f"p{i % 7:02d},s{i % 3},{i}" for i in range(3000)]
    data = ("participant_id,session_id,second\n" + "\n".join(rows) + "\n").encode()
    fast = _arrow(data, block_bytes=200)
    careful = csvfile._careful_records(data, "f.csv", ["participant_id"])
    assert _rows(fast) == _rows(careful)
    assert fast.lines.tolist() == list(range(1, 3002))
    assert sorted(fast.values[0]) == sorted(["participant_id"] + [f"p{i:02d}" for i in range(7)])


def test_unclosed_quote_on_the_last_line_is_refused(tmp_path):
    for data in (b'participant_id,cohort\np01,"a', b'participant_id,cohort\np01,"a\n'):
        with pytest.raises(InputError) as info:
            _read(tmp_path, data)
        assert "never closed" in info.value.render()


def test_plain_file_is_read_by_arrow(tmp_path, monkeypatch):
    def refuse(*args):
        raise AssertionError("the careful reader ran")

    monkeypatch.setattr(csvfile, "_careful_records", refuse)
    table = _read(tmp_path, b'participant_id,cohort\np01,"a, b" \r\np02, b\r\n')
    assert table.frame.iloc[:, 1].tolist() == ["a, b", "b"]
    assert table.lines.tolist() == [2, 3]


def test_categorical_frame_holds_the_same_strings(tmp_path):
    data = (b"participant_id,cohort,note\np01, alpha ,\np02,beta, x\n\np03,alpha ,participant_id\n"
            b",,\n")
    text = _read(tmp_path, data)
    cats = _read(tmp_path, data, categorical=True)
    assert cats.columns == text.columns and cats.lines.tolist() == text.lines.tolist()
    for name in text.columns:
        assert isinstance(cats.frame[name].dtype, pd.CategoricalDtype)
        assert cats.frame[name].astype(object).tolist() == text.frame[name].tolist()
        # the categories are the values present (not the header's name, say)
        assert sorted(cats.frame[name].cat.categories) == sorted(set(text.frame[name]))
    assert text.frame["cohort"].tolist() == ["alpha", "beta", "alpha"]
    assert text.frame["note"].tolist() == ["", "x", "participant_id"]


def test_big_table_is_held_compactly(tmp_path):
    # line numbers as int32 and category codes in the smallest type (a media log of
    # millions of rows is held by the runner while the run goes on)
    rows = "".join(f"p{i % 3},s1,{i}\n" for i in range(1000))
    path = tmp_path / "media_log.csv"
    path.write_text("participant_id,session_id,second\n" + rows)
    table = read_table(path, "media_log.csv", ["participant_id"], categorical=True)
    assert table.lines.dtype == np.int32 and table.lines[[0, -1]].tolist() == [2, 1001]
    assert table.frame["participant_id"].cat.codes.dtype == np.int8
    assert table.frame["second"].cat.codes.dtype == np.int16
    assert table.frame["participant_id"].astype(object).tolist()[:4] == ["p0", "p1", "p2", "p0"]
