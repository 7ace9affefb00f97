"""sync.csv and survey.csv rules (CONTRACT §1), both optional."""

from __future__ import annotations

import pytest

from ingest_builders import TOML, assert_names, load, refusal, write_study

SYNC_HEADER = "participant_id,session_id,video_s,sensor_s\n"
SURVEY_HEADER = "participant_id,item,value\n"
SCALE = TOML + "\n[survey]\nscale_min = 1\nscale_max = 7\n"


def test_sync_is_read_as_numbers(tmp_path):
    write_study(tmp_path)
    sync = load(tmp_path).sync
    assert sync.columns.tolist() == ["participant_id", "session_id", "video_s", "sensor_s"]
    assert sync["sensor_s"].tolist() == [3.5, 17.5, 2.0]
    assert str(sync["video_s"].dtype) == "float64"


def test_no_sync_file_gives_an_empty_table_and_a_warning(tmp_path):
    write_study(tmp_path, sync=None)
    study = load(tmp_path)
    assert study.sync.empty and study.sync.columns.tolist() == [
        "participant_id", "session_id", "video_s", "sensor_s"]
    assert any("aligned at zero" in w for w in study.warnings)


def test_sync_with_header_only_means_no_events(tmp_path):
    write_study(tmp_path, sync=SYNC_HEADER)
    study = load(tmp_path)
    assert study.sync.empty
    assert any(w.startswith("sync.csv: has no rows") for w in study.warnings)


def test_survey_with_header_only_is_an_empty_table(tmp_path):
    write_study(tmp_path, survey=SURVEY_HEADER)
    study = load(tmp_path)
    assert study.survey is not None and study.survey.empty
    assert any(w.startswith("survey.csv: has no rows") for w in study.warnings)


@pytest.mark.parametrize("column,bad", [("video_s", "abc"), ("sensor_s", "inf"),
                                        ("video_s", "nan"), ("sensor_s", ""),
                                        ("video_s", "1,5")])
def test_sync_value_not_a_finite_number_is_refused(tmp_path, column, bad):
    row = {"video_s": "1.0", "sensor_s": "2.0"}
    row[column] = f'"{bad}"'
    write_study(tmp_path, sync=SYNC_HEADER + f"p01,s1,{row['video_s']},{row['sensor_s']}\n")
    assert_names(refusal(tmp_path), "sync.csv", 2, column, bad)


def test_sync_of_unknown_session_is_refused(tmp_path):
    write_study(tmp_path, sync=SYNC_HEADER + "p01,s1,1,2\np01,s5,1,2\n")
    assert_names(refusal(tmp_path), "sync.csv", 3, "session_id", "s5",
                 says="not a session of participant 'p01'")


def test_survey_is_read(tmp_path):
    write_study(tmp_path)
    survey = load(tmp_path).survey
    assert survey.columns.tolist() == ["participant_id", "item", "value"]
    assert survey["value"].tolist() == [5.0, 3.0, 2.0]


def test_no_survey_file_gives_none(tmp_path):
    write_study(tmp_path, survey=None)
    assert load(tmp_path).survey is None


def test_survey_participant_not_in_roster_is_refused(tmp_path):
    write_study(tmp_path, survey=SURVEY_HEADER + "p01,joy,3\npX,joy,4\n")
    assert_names(refusal(tmp_path), "survey.csv", 3, "participant_id", "pX",
                 says="not a participant of roster.csv")


@pytest.mark.parametrize("bad", ["high", "inf", "", "NaN"])
def test_survey_value_not_a_number_is_refused(tmp_path, bad):
    write_study(tmp_path, survey=SURVEY_HEADER + f"p01,joy,3\np02,joy,{bad}\n")
    assert_names(refusal(tmp_path), "survey.csv", 3, "value", bad)


@pytest.mark.parametrize("bad", ["0", "7.5", "-2"])
def test_survey_value_outside_the_scale_is_refused(tmp_path, bad):
    write_study(tmp_path, toml=SCALE, survey=SURVEY_HEADER + f"p01,joy,7\np02,joy,{bad}\n")
    assert_names(refusal(tmp_path), "survey.csv", 3, "value", bad,
                 says="outside the scale ([survey] scale_min/scale_max: 1.0 to 7.0)")


def test_survey_scale_bounds_are_inclusive(tmp_path):
    write_study(tmp_path, toml=SCALE, survey=SURVEY_HEADER + "p01,joy,1\np02,joy,7\n")
    assert load(tmp_path).survey["value"].tolist() == [1.0, 7.0]


def test_survey_duplicate_item_is_refused(tmp_path):
    write_study(tmp_path, survey=SURVEY_HEADER + "p01,joy,3\np01,joy,4\n")
    assert_names(refusal(tmp_path), "survey.csv", 3, "item", "joy", says="of line 2")


def test_survey_items_restrict_the_rows_and_catch_typos(tmp_path):
    toml = TOML + '\n[survey]\nitems = ["enjoyment"]\n'
    write_study(tmp_path, toml=toml)
    study = load(tmp_path)
    assert study.survey["item"].unique().tolist() == ["enjoyment"]
    assert any("left out: fatigue" in w for w in study.warnings)
    write_study(tmp_path / "typo", toml=TOML + '\n[survey]\nitems = ["enjoymnet"]\n')
    assert_names(refusal(tmp_path / "typo"), "survey.csv", None, "item", "enjoymnet",
                 says="did you mean 'enjoyment'?")
