"""`screenweave check STUDY` through typer's CliRunner."""

from __future__ import annotations

import sys
from pathlib import Path

from typer.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "ingest"))
from ingest_builders import TOML, second_log, tree_hashes, write_study  # noqa: E402

from pipeline.cli import app  # noqa: E402
from pipeline.errors import InputError  # noqa: E402

runner = CliRunner()


def _check(*args):
    return runner.invoke(app, ["check", *map(str, args)])


def test_help_describes_the_command():
    result = _check("--help")
    assert result.exit_code == 0
    assert "Check a study folder against the data contract" in result.output
    assert "STUDY" in result.output


def test_valid_study_prints_its_summary_and_exits_0(tmp_path):
    write_study(tmp_path, media_log_files={"ana.csv": second_log(), "ben.csv": second_log()})
    result = _check(tmp_path)
    assert result.exit_code == 0, result.output
    out = result.output
    assert "participants: 2 (alpha: 1, beta: 1)" in out
    assert "sessions: 2" in out
    # 2 sessions x 20 coded seconds (both coders code the same seconds)
    assert "coded hours: 0.01 (40 of 40 session seconds" in out
    assert "platforms seen: phone, tv (vocabulary declared in [platforms]: magazine, phone, tv)" \
        in out
    assert "p01/s1: 20 s, coded 20 s, coders: ana, ben, sync pairs: 2, signal: eda_us, hr_bpm " \
        "at 4 Hz, 100 samples" in out
    assert "p02/s1: 20 s, coded 20 s, coders: ana, ben, sync pairs: 1" in out
    assert out.rstrip().endswith("study is valid")


def test_summary_says_when_no_vocabulary_is_declared(tmp_path):
    write_study(tmp_path, toml='[study]\ntimezone = "Europe/Berlin"\n')
    result = _check(tmp_path)
    assert result.exit_code == 0, result.output
    assert "no [platforms] vocabulary declared" in result.output
    assert "warnings (1):" in result.output


def test_check_accepts_a_study_toml(tmp_path):
    write_study(tmp_path / "data", toml=None)
    (tmp_path / "s.toml").write_text('[study]\ndata_dir = "data"\n' + TOML.split("\n", 1)[1])
    result = _check(tmp_path / "s.toml")
    assert result.exit_code == 0, result.output
    assert "settings: " + str(tmp_path / "s.toml") in result.output


def test_refused_study_exits_2_without_traceback(tmp_path):
    write_study(tmp_path, media_log=second_log().replace("p01,s1,3,tv,tv", "p01,s1,3,tv,phone"))
    result = _check(tmp_path)
    assert result.exit_code == 2
    assert "media_log.csv, line 5, column 'attended': value 'phone' is not one of the " \
        "platforms in view (tv)" in result.output
    assert "Traceback" not in result.output
    assert isinstance(result.exception, SystemExit)


def test_many_problems_of_one_file_are_capped_with_a_count(tmp_path):
    bad = "\n".join(f"p01,s1,-{i},tv,tv" for i in range(1, 26))
    write_study(tmp_path, media_log="participant_id,session_id,second,in_view,attended\n"
                + bad + "\n")
    result = _check(tmp_path)
    assert result.exit_code == 2
    assert result.output.count("column 'second'") == 20  # errors.MAX_PROBLEMS_SHOWN
    assert "media_log.csv: ... and 5 more problem(s) of this file not shown" in result.output


def test_debug_shows_the_error_itself(tmp_path):
    write_study(tmp_path, roster="participant_id,cohort\np 1,alpha\n")
    result = runner.invoke(app, ["--debug", "check", str(tmp_path)])
    assert isinstance(result.exception, InputError)


def test_unknown_setting_gets_did_you_mean(tmp_path):
    write_study(tmp_path, toml='[study]\ntimezon = "Europe/Berlin"\n')
    result = _check(tmp_path)
    assert result.exit_code == 2
    assert "unknown setting [study] 'timezon'; did you mean 'timezone'?" in result.output


def test_unreadable_recording_exits_2_naming_the_file(tmp_path):
    write_study(tmp_path)
    path = tmp_path / "signals" / "p02__s1.parquet"
    path.write_bytes(path.read_bytes()[:100])
    result = _check(tmp_path)
    assert result.exit_code == 2
    assert "signals/p02__s1.parquet: cannot be read as a recording" in result.output
    assert "p02/s1: 20 s, coded 20 s, coders: (unnamed), sync pairs: 1, signal: recording " \
        "unreadable" in result.output


def test_check_writes_nothing(tmp_path):
    write_study(tmp_path)
    before = tree_hashes(tmp_path)
    assert _check(tmp_path).exit_code == 0
    assert tree_hashes(tmp_path) == before


def test_missing_folder_exits_2(tmp_path):
    result = _check(tmp_path / "nowhere")
    assert result.exit_code == 2
    assert "no such study folder" in result.output
