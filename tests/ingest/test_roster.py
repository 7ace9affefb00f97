"""roster.csv rules (CONTRACT §1): ID rule, unique participants, cohort, covariates."""

from __future__ import annotations

import pytest

from ingest_builders import SESSIONS, assert_names, load, refusal, write_study


@pytest.mark.parametrize("bad", ["p 01", "p/01", "p.01", "pä01", "x" * 65])
def test_participant_id_outside_the_id_rule_is_refused(tmp_path, bad):
    write_study(tmp_path, roster=f"participant_id,cohort\np01,alpha\n{bad},beta\n")
    err = refusal(tmp_path)
    assert_names(err, "roster.csv", 3, "participant_id", bad, says="not a valid participant ID")
    assert "A-Z, a-z, 0-9, '_' and '-'" in err.render()


def test_id_of_64_characters_is_allowed(tmp_path):
    long_id = "p" * 64
    write_study(tmp_path, roster=f"participant_id,cohort\np01,alpha\np02,beta\n{long_id},beta\n")
    assert long_id in load(tmp_path).roster["participant_id"].tolist()


def test_empty_participant_id_is_refused(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np01,alpha\n,beta\np02,beta\n")
    assert_names(refusal(tmp_path), "roster.csv", 3, "participant_id", "", says="is empty")


def test_duplicate_participant_names_both_lines(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np01,alpha\np02,beta\np01,beta\n")
    assert_names(refusal(tmp_path), "roster.csv", 4, "participant_id", "p01",
                 says="of line 2")


def test_missing_cohort_is_refused(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np01,alpha\np02,\n")
    assert_names(refusal(tmp_path), "roster.csv", 3, "cohort", "", says="cohort")


def test_all_problems_of_the_roster_come_together(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np 1,alpha\np01,\np01,beta\np02,b\n")
    err = refusal(tmp_path)
    assert [(p.line, p.column) for p in err.problems if p.file == "roster.csv"] == [
        (2, "participant_id"), (4, "participant_id"), (3, "cohort")]


def test_other_columns_are_kept_as_covariates(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort,birth_year,score,household_id\n"
                "p01,alpha,1990,1.5,h1\np02,beta,1985,,h2\n", sessions=SESSIONS)
    roster = load(tmp_path).roster
    assert roster["birth_year"].tolist() == [1990, 1985]
    assert str(roster["birth_year"].dtype) == "int64"
    assert roster["score"].iloc[0] == 1.5 and roster["score"].isna().iloc[1]
    assert roster["household_id"].tolist() == ["h1", "h2"]
