"""load_study as a whole: every Study field, read-only inputs, ordering of the checks."""

from __future__ import annotations

import pandas as pd

from ingest_builders import load, refusal, second_log, tree_hashes, write_study


def test_every_study_field_is_filled(tmp_path):
    write_study(tmp_path)
    study = load(tmp_path)
    assert study.root == tmp_path.resolve()
    assert study.roster.columns.tolist()[:2] == ["participant_id", "cohort"]
    assert study.sessions.columns.tolist() == ["participant_id", "session_id", "start", "end",
                                               "duration_s"]
    assert isinstance(study.sessions["start"].iloc[0], pd.Timestamp)
    assert str(study.sessions["end"].dt.tz) == "UTC"
    assert study.sessions["duration_s"].dtype == "int64"
    assert len(study.media_log) == 40 and len(study.sync) == 3 and len(study.survey) == 3
    assert len(study.recordings) == 2 and study.vocabulary_declared
    assert [p.name for p in study.input_files] == [
        "roster.csv", "sessions.csv", "media_log.csv", "sync.csv", "survey.csv",
        "p01__s1.parquet", "p02__s1.parquet"]
    assert study.warnings == []
    assert [k.label() for k in study.session_keys()] == ["p01/s1", "p02/s1"]


def test_input_files_are_byte_identical_after_loading(tmp_path):
    write_study(tmp_path, media_log_files={"ana.csv": second_log(), "ben.csv": second_log()})
    (tmp_path / "roster.csv").write_bytes(b"\xef\xbb\xbf" + (tmp_path / "roster.csv").read_bytes())
    before = tree_hashes(tmp_path)
    load(tmp_path)
    assert tree_hashes(tmp_path) == before


def test_input_files_are_byte_identical_after_a_refusal(tmp_path):
    write_study(tmp_path, media_log="participant_id,session_id,second,in_view,attended\n"
                "p01,s1,-1,tv,tv\n")
    before = tree_hashes(tmp_path)
    refusal(tmp_path)
    assert tree_hashes(tmp_path) == before


def test_roster_and_sessions_problems_come_before_and_together(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np01,\np02,beta\n",
                sessions="participant_id,session_id,start,end\n"
                "p01,s1,bad,2026-03-01T19:00:20Z\np02,s1,2026-03-01T19:00:00Z,"
                "2026-03-01T19:00:20Z\n",
                media_log="garbage")
    err = refusal(tmp_path)
    assert {p.file for p in err.problems} == {"roster.csv", "sessions.csv"}


def test_study_toml_target_names_the_folder(tmp_path):
    write_study(tmp_path / "data", toml=None)
    toml = tmp_path / "my.toml"
    toml.write_text('[study]\ndata_dir = "data"\ntimezone = "Europe/Berlin"\n')
    study = load(toml)
    assert study.root == (tmp_path / "data").resolve()
    assert len(study.sessions) == 2
