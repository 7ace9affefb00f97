"""Media log rules (CONTRACT §1): both forms, several files, coders, vocabulary."""

from __future__ import annotations

import random

import numpy as np
import pandas as pd
import pytest
from ingest_builders import assert_names, load, refusal, second_log, write_study

from pipeline.ingest import media_log

HEADER = "participant_id,session_id,second,in_view,attended\n"
INTERVAL_HEADER = "participant_id,session_id,platform,start_s,end_s,role\n"
NO_VOCAB = '[study]\ntimezone = "Europe/Berlin"\n'


def _log(*rows: str, header: str = HEADER) -> str:
    return header + "\n".join(rows) + "\n"


# ----------------------------------------------------------------- second-by-second form
def test_second_form_is_read_and_in_view_normalised(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv;phone,tv", "p01,s1,1, tv ; tv ;,",
                                         "p01,s1,2,,", "p02,s1,5,phone;;tv,phone"))
    log = load(tmp_path).media_log
    assert log.columns.tolist() == ["participant_id", "session_id", "second", "in_view",
                                    "attended", "coder"]
    assert log["in_view"].tolist() == ["phone;tv", "tv", "", "phone;tv"]
    assert log["attended"].tolist() == ["tv", "", "", "phone"]
    assert log["second"].tolist() == [0, 1, 2, 5] and str(log["second"].dtype) == "int32"
    assert log["coder"].tolist() == ["", "", "", ""]


def test_seconds_missing_from_the_log_stay_uncoded(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s1,7,tv,tv"))
    study = load(tmp_path)
    assert study.media_log["second"].tolist() == [0, 7]
    assert any("no coded second" in w and "p02/s1" in w for w in study.warnings)


def test_row_of_unknown_participant_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p07,s1,1,tv,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "participant_id", "p07",
                 says="has no session in sessions.csv")


def test_row_of_unknown_session_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s2,1,tv,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "session_id", "s2",
                 says="is not a session of participant 'p01'")


@pytest.mark.parametrize("bad", ["-1", "1.5", "abc", "", "1e3", "inf", "nan",
                                 "99999999999999999999999"])
def test_second_not_a_non_negative_integer_is_refused(tmp_path, bad):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", f"p01,s1,{bad},tv,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "second", bad)


def test_whole_number_written_with_decimals_is_accepted(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,3.0,tv,tv"))
    assert load(tmp_path).media_log["second"].tolist() == [3]


def test_second_at_or_past_the_session_end_is_refused(tmp_path):
    # sessions last 20 s (builders), so seconds run 0..19
    write_study(tmp_path, media_log=_log("p01,s1,19,tv,tv", "p01,s1,20,tv,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "second", "20",
                 says="seconds run 0 to 19")


def test_duplicate_second_and_coder_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s1,1,tv,", "p01,s1,0,tv,"))
    assert_names(refusal(tmp_path), "media_log.csv", 4, "second", "0",
                 says="already coded on line 2")


def test_same_second_by_two_coders_is_fine(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv,a", "p01,s1,0,tv,,b",
                                         header=HEADER.strip() + ",coder\n"))
    study = load(tmp_path)
    assert study.media_log["coder"].tolist() == ["a", "b"]
    from pipeline.types import SessionKey
    assert study.coders(SessionKey("p01", "s1")) == ["a", "b"]


def test_attended_not_in_view_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s1,1,tv,phone"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "attended", "phone",
                 says="not one of the platforms in view (tv)")


def test_attended_with_nothing_in_view_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 2, "attended", "tv",
                 says="in view (nothing)")


def test_attended_naming_two_platforms_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,phone;tv,phone;tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 2, "attended", "phone;tv",
                 says="more than one platform")


def test_code_outside_the_declared_vocabulary_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s1,1,tv;phonee,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "in_view", "tv;phonee",
                 says="did you mean 'phone'?")


def test_code_with_plus_is_refused(tmp_path):
    write_study(tmp_path, toml=NO_VOCAB, media_log=_log("p01,s1,0,tv+phone,"))
    assert_names(refusal(tmp_path), "media_log.csv", 2, "in_view", "tv+phone",
                 says="reserved")


def test_code_named_none_is_refused(tmp_path):
    # 'none' is the contract's name of the state with nothing in view (CONTRACT §2) and
    # the agreement tables' category for "nothing attended": it cannot be a platform.
    write_study(tmp_path, toml=NO_VOCAB, media_log=_log("p01,s1,0,none;tv,tv"))
    assert_names(refusal(tmp_path), "media_log.csv", 2, "in_view", "none;tv",
                 says="reserved")


def test_without_vocabulary_every_code_seen_is_accepted_and_listed(tmp_path):
    write_study(tmp_path, toml=NO_VOCAB, media_log=_log("p01,s1,0,radio;tv,radio",
                                                        "p02,s1,0,zine,"))
    study = load(tmp_path)
    assert study.vocabulary_declared is False
    assert study.platform_groups == {"radio": "ungrouped", "tv": "ungrouped",
                                     "zine": "ungrouped"}
    assert any("no [platforms] vocabulary" in w and "radio, tv, zine" in w
               for w in study.warnings)


def test_declared_vocabulary_gives_the_groups(tmp_path):
    write_study(tmp_path)
    study = load(tmp_path)
    assert study.vocabulary_declared is True
    assert study.platform_groups == {"tv": "screen", "phone": "screen", "magazine": "print"}


def test_all_problems_of_one_log_file_come_together(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,x,tv,tv", "p01,s1,1,tv,phone",
                                         "p01,s9,2,tv,tv", "p01,s1,3,zz,"))
    err = refusal(tmp_path)
    assert sorted((p.line, p.column) for p in err.problems) == [
        (2, "second"), (3, "attended"), (4, "session_id"), (5, "in_view")]


# --------------------------------------------------------------------------- files
def test_several_files_take_the_file_stem_as_coder(tmp_path):
    write_study(tmp_path, media_log_files={"ana.csv": second_log(),
                                           "ben.csv": second_log()})
    study = load(tmp_path)
    assert sorted(study.media_log["coder"].unique()) == ["ana", "ben"]
    assert len(study.media_log) == 80
    assert [p.name for p in study.input_files if "media_log" in str(p)] == ["ana.csv", "ben.csv"]


def test_coder_column_wins_over_the_file_stem(tmp_path):
    write_study(tmp_path, media_log_files={"part1.csv": second_log(coder="ana"),
                                           "part2.csv": second_log(coder="ben")})
    assert sorted(load(tmp_path).media_log["coder"].unique()) == ["ana", "ben"]


def test_primary_coder_that_codes_nothing_is_a_warning(tmp_path):
    toml = '[study]\ntimezone = "UTC"\n[coding]\nprimary_coder = "anna"\n'
    write_study(tmp_path, toml=toml, media_log_files={"ana.csv": second_log(),
                                                      "ben.csv": second_log()})
    warnings = load(tmp_path).warnings
    assert any("primary_coder = 'anna' codes no session; did you mean 'ana'?" in w
               for w in warnings)


def test_single_file_in_folder_without_coder_gives_empty_coder(tmp_path):
    write_study(tmp_path, media_log_files={"log.csv": second_log()})
    assert load(tmp_path).media_log["coder"].unique().tolist() == [""]


def test_same_coder_in_two_files_is_a_duplicate_naming_both_files(tmp_path):
    write_study(tmp_path, media_log_files={"a.csv": second_log(coder="ana"),
                                           "b.csv": second_log(coder="ana")})
    err = refusal(tmp_path)
    assert_names(err, "media_log/b.csv", 2, "second", "0",
                 says="already coded on line 2 of media_log/a.csv")


def test_problems_of_several_files_are_reported_together(tmp_path):
    write_study(tmp_path, media_log_files={"a.csv": _log("p01,s1,-4,tv,tv"),
                                           "b.csv": _log("p01,s1,0,tv,phone")})
    err = refusal(tmp_path)
    assert {p.file for p in err.problems} == {"media_log/a.csv", "media_log/b.csv"}


def test_both_media_log_csv_and_folder_is_refused(tmp_path):
    write_study(tmp_path, media_log_files={"a.csv": second_log()})
    (tmp_path / "media_log.csv").write_text(second_log())
    assert "both exist" in refusal(tmp_path).render()


def test_no_media_log_is_refused(tmp_path):
    write_study(tmp_path, media_log=None)
    assert_names(refusal(tmp_path), "media_log.csv", None, None, None, says="is missing")


def test_file_in_neither_form_is_refused(tmp_path):
    write_study(tmp_path, media_log="participant_id,session_id,time,what\np01,s1,0,tv\n")
    err = refusal(tmp_path)
    assert "neither media log form" in err.render()
    assert_names(err, "media_log.csv", 1, "second", None, says="has no column 'second'")


def test_missing_attended_column_is_refused(tmp_path):
    write_study(tmp_path, media_log="participant_id,session_id,second,in_view\np01,s1,0,tv\n")
    assert_names(refusal(tmp_path), "media_log.csv", 1, "attended", None,
                 says="has no column 'attended'")


# --------------------------------------------------------------------------- intervals
def test_interval_form_becomes_seconds_over_the_coded_span(tmp_path):
    log = _log("p01,s1,tv,2,8,in_view", "p01,s1,phone,5,7,in_view", "p01,s1,tv,2,5,attended",
               "p01,s1,phone,5,6,attended", "p01,s1,tv,10,12,in_view",
               header=INTERVAL_HEADER)
    write_study(tmp_path, media_log=log)
    m = load(tmp_path).media_log
    # coded span [2, 12): 8 and 9 are coded with nothing in view; 0, 1 and 12.. uncoded
    assert m["second"].tolist() == list(range(2, 12))
    assert m["in_view"].tolist() == ["tv", "tv", "tv", "phone;tv", "phone;tv", "tv", "", "",
                                     "tv", "tv"]
    assert m["attended"].tolist() == ["tv", "tv", "tv", "phone", "", "", "", "", "", ""]
    assert set(m["participant_id"]) == {"p01"} and set(m["coder"]) == {""}


def test_interval_form_equals_the_same_log_second_by_second(tmp_path):
    seconds = _log(*[f"p01,s1,{s},{'tv' if s < 4 else 'phone;tv'},{'tv' if s < 6 else 'phone'}"
                     for s in range(10)])
    intervals = _log("p01,s1,tv,0,10,in_view", "p01,s1,phone,4,10,in_view",
                     "p01,s1,tv,0,6,attended", "p01,s1,phone,6,10,attended",
                     header=INTERVAL_HEADER)
    a = load(write_study(tmp_path / "a", media_log=seconds)).media_log
    b = load(write_study(tmp_path / "b", media_log=intervals)).media_log
    assert a.equals(b)


def test_interval_and_second_files_mix_with_stem_coders(tmp_path):
    write_study(tmp_path, media_log_files={
        "ana.csv": _log("p01,s1,tv,0,3,in_view", header=INTERVAL_HEADER),
        "ben.csv": _log("p01,s1,0,tv,", "p01,s1,1,tv,tv")})
    m = load(tmp_path).media_log
    assert m.groupby("coder", observed=True).size().to_dict() == {"ana": 3, "ben": 2}


@pytest.mark.parametrize("row,column,value,says", [
    ("p01,s1,tv,5,5,in_view", "end_s", "5", "not after start_s"),
    ("p01,s1,tv,6,2,in_view", "end_s", "2", "not after start_s"),
    ("p01,s1,tv,-1,2,in_view", "start_s", "-1", "whole number"),
    ("p01,s1,tv,0,2.5,in_view", "end_s", "2.5", "whole number"),
    ("p01,s1,tv,10,21,in_view", "end_s", "21", "end_s is at most 20"),
    ("p01,s1,tv,0,2,looked", "role", "looked", "role is in_view or attended"),
    ("p01,s1,,0,2,in_view", "platform", "", "names one platform"),
    ("p01,s1,radio,0,2,in_view", "platform", "radio", "vocabulary"),
    ("p01,s1,tv;phone,0,2,in_view", "platform", "tv;phone", "reserved"),
    ("p03,s1,tv,0,2,in_view", "participant_id", "p03", "no session"),
])
def test_interval_rule_refusals(tmp_path, row, column, value, says):
    write_study(tmp_path, media_log=_log("p01,s1,tv,0,20,in_view", row, header=INTERVAL_HEADER))
    assert_names(refusal(tmp_path), "media_log.csv", 3, column, value, says=says)


def test_interval_attended_outside_in_view_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log("p01,s1,tv,0,5,in_view", "p01,s1,tv,3,8,attended",
                                         header=INTERVAL_HEADER))
    assert_names(refusal(tmp_path), "media_log.csv", 3, "platform", "tv",
                 says="attended from second 5 but not in view")


def test_interval_two_platforms_attended_at_once_is_refused(tmp_path):
    write_study(tmp_path, media_log=_log(
        "p01,s1,tv,0,10,in_view", "p01,s1,phone,0,10,in_view", "p01,s1,tv,0,5,attended",
        "p01,s1,phone,4,8,attended", header=INTERVAL_HEADER))
    assert_names(refusal(tmp_path), "media_log.csv", 4, "platform", "tv",
                 says="at second 4 while 'phone' (line 5) is attended too")


def test_file_mixing_both_forms_is_refused(tmp_path):
    write_study(tmp_path, media_log="participant_id,session_id,second,in_view,attended,"
                "start_s\np01,s1,0,tv,tv,0\n")
    assert "mixes the columns of both" in refusal(tmp_path).render()



# ------------------------------------------------------ how the log is held in memory
def test_log_text_columns_are_categoricals_of_the_values_present(tmp_path):
    write_study(tmp_path, media_log=second_log(coder="coder_a"))
    log = load(tmp_path).media_log
    for column in ("participant_id", "session_id", "in_view", "attended", "coder"):
        assert isinstance(log[column].dtype, pd.CategoricalDtype), column
        categories = list(log[column].cat.categories)
        assert categories == sorted(set(log[column].astype(object))), column
    assert list(log["in_view"].cat.categories) == ["", "phone;tv", "tv"]  # '' stays ''


def _shuffled_log(seed: int) -> str:
    rows = second_log(coder="coder_a").splitlines()
    body = rows[1:] + [r.replace("coder_a", "coder_b") for r in rows[1:][::3]]
    random.Random(seed).shuffle(body)
    return "\n".join([rows[0], *body]) + "\n"


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_log_rows_are_sorted_as_by_their_strings(tmp_path, seed):
    write_study(tmp_path, media_log=_shuffled_log(seed))
    log = load(tmp_path).media_log
    plain = log.astype({c: object for c in ("participant_id", "session_id", "in_view",
                                            "attended", "coder")})
    expected = plain.sort_values(["participant_id", "session_id", "coder", "second"],
                                 kind="stable").reset_index(drop=True)
    assert plain.equals(expected)


def test_sort_without_the_int64_key_gives_the_same_log_and_problems(tmp_path, monkeypatch):
    # _sort_key gives up (None) when the keys could overflow an int64; pandas then sorts
    # and finds the repeats. Both ways must agree.
    valid = _shuffled_log(4)
    write_study(tmp_path / "valid", media_log=valid)
    write_study(tmp_path / "repeats", media_log=valid + "p01,s1,3,tv,tv,coder_a\n"
                "p02,s1,9,phone;tv,phone,coder_a\n")
    log, err = load(tmp_path / "valid").media_log, refusal(tmp_path / "repeats")
    assert len(err.problems) == 2
    monkeypatch.setattr(media_log, "_sort_key", lambda log: None)
    assert load(tmp_path / "valid").media_log.equals(log)
    assert [p.render() for p in refusal(tmp_path / "repeats").problems] == \
        [p.render() for p in err.problems]


def test_several_files_share_one_set_of_categories(tmp_path):
    write_study(tmp_path, media_log=None, media_log_files={
        "ana.csv": _log("p01,s1,tv,0,3,in_view", "p01,s1,tv,1,2,attended",
                        header=INTERVAL_HEADER),
        "ben.csv": _log("p01,s1,0,magazine,", "p02,s1,1,tv,tv")})
    log = load(tmp_path).media_log
    assert isinstance(log["coder"].dtype, pd.CategoricalDtype)
    assert list(log["coder"].cat.categories) == ["ana", "ben"]
    assert list(log["in_view"].cat.categories) == ["magazine", "tv"]
    assert log["attended"].astype(object).tolist() == ["", "tv", "", "", "tv"]
    assert log["coder"].astype(object).tolist() == ["ana", "ana", "ana", "ben", "ben"]


def test_bad_in_view_cells_are_reported_in_the_order_they_appear(tmp_path):
    # the header's own name is a value of the column too: order still by the rows
    write_study(tmp_path, media_log=_log("p01,s1,0,tv,tv", "p01,s1,1,radio,",
                                         "p01,s1,2,in_view,", "p01,s1,3,radio,"))
    err = refusal(tmp_path)
    assert [(p.line, p.value) for p in err.problems] == [(3, "radio"), (5, "radio"),
                                                        (4, "in_view")]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_sort_key_orders_as_the_columns_do(tmp_path, seed):
    # The int64 key made in place (Horner's scheme) must order rows exactly as sorting
    # by participant, session, coder and second does; checked against numpy's lexsort.
    write_study(tmp_path, media_log=_shuffled_log(seed))
    log = load(tmp_path).media_log.sample(frac=1, random_state=seed)
    key = media_log._sort_key(log)
    columns = [log[c].cat.codes.to_numpy() if c != "second" else log[c].to_numpy()
               for c in media_log.ORDER]
    assert (np.argsort(key, kind="stable") == np.lexsort(columns[::-1])).all()


def test_sort_key_gives_up_where_an_int64_could_overflow():
    n = 3
    log = pd.DataFrame({c: pd.Categorical([f"{c}{i}" for i in range(n)])
                        for c in ("participant_id", "session_id", "coder")})
    log["second"] = np.array([0, 1, 2**61], dtype=np.int64)
    assert media_log._sort_key(log) is None  # 3 * 3 * 3 * (2**61 + 1) >= 2**62


def test_session_runs_find_each_session_and_its_coders(tmp_path):
    write_study(tmp_path, media_log=_shuffled_log(5))
    log = load(tmp_path).media_log
    runs = media_log.session_runs(log)
    plain = log.astype({"participant_id": object, "session_id": object, "coder": object})
    expected = plain.groupby(["participant_id", "session_id"])  # the slow way, to compare
    assert sorted(runs) == sorted(expected.groups)
    for key, rows in expected.indices.items():
        assert list(range(runs[key].rows.start, runs[key].rows.stop)) == list(rows)
        assert runs[key].several_coders == (plain.iloc[rows]["coder"].nunique() > 1)
    assert any(r.several_coders for r in runs.values())  # the shuffled log has coder_b
    assert media_log.session_runs(log.iloc[:0]) == {}


def test_session_runs_refuse_a_log_out_of_order(tmp_path):
    write_study(tmp_path, media_log=second_log())
    log = load(tmp_path).media_log
    with pytest.raises(RuntimeError, match="sorted"):
        media_log.session_runs(log.sample(frac=1, random_state=0))  # sessions interleaved
