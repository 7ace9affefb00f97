"""Robust CSV reading: encodings, separators, line numbers and whole-file refusals."""

from __future__ import annotations

import pytest

from ingest_builders import ROSTER, assert_names, load, refusal, write_study
from pipeline.errors import InputError
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
