"""`screenweave synth` through the CLI runner."""

from __future__ import annotations

import json

import pandas as pd
from typer.testing import CliRunner

from pipeline.cli import app

runner = CliRunner()
TINY = ["--participants-per-cohort", "1", "--sessions", "1", "--hours", "0.3",
        "--rate-hz", "4", "--seed", "3"]


def _quick(tmp_path) -> list[str]:
    """A config file that keeps the truth's Monte Carlo short, so the tests stay fast."""
    cfg = tmp_path / "quick.toml"
    cfg.write_text("truth_simulation_hours = 4.0\n", encoding="utf-8")
    return ["--config", str(cfg)]


def test_help_names_the_main_options():
    # wide enough a terminal that rich prints the option names in full
    result = runner.invoke(app, ["synth", "--help"],
                           env={"COLUMNS": "240", "TERMINAL_WIDTH": "240"})
    assert result.exit_code == 0
    for flag in ("--participants-per-cohort", "--sessions", "--hours", "--rate-hz", "--seed",
                 "--no-artifacts", "--drift-ppm", "--offset-s", "--no-uncoded",
                 "--double-coded-share", "--config", "--force"):
        assert flag in result.output


def test_synth_writes_a_study_and_says_what(tmp_path):
    out = tmp_path / "study"
    result = runner.invoke(app, ["synth", str(out), *TINY, *_quick(tmp_path),
                                 "--no-artifacts", "--no-uncoded",
                                 "--drift-ppm", "-15", "--offset-s", "30",
                                 "--double-coded-share", "1"])
    assert result.exit_code == 0, result.output
    for name in ("roster.csv", "sessions.csv", "media_log.csv", "sync.csv", "survey.csv",
                 "study.toml", "signals/", "truth/"):
        assert name in result.output
        assert (out / name.rstrip("/")).exists()
    truth = pd.read_csv(out / "truth" / "sessions.csv")
    assert len(truth) == 2 and (truth["uncoded_seconds"] == 0).all()
    assert (truth["artifacts"] == 0).all() and truth["double_coded"].all()
    params = json.loads((out / "truth" / "parameters.json").read_text())
    assert params["options"]["seed"] == 3
    assert params["options"]["clock"]["drift_ppm"] == -15.0
    assert params["options"]["clock"]["offset_s"] == 30.0
    assert params["options"]["sampling_rate_hz"] == 4.0
    assert params["options"]["truth_simulation_hours"] == 4.0  # from the config file


def test_refuses_a_non_empty_folder_unless_forced(tmp_path):
    out = tmp_path / "study"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    result = runner.invoke(app, ["synth", str(out), *TINY, *_quick(tmp_path)])
    assert result.exit_code == 2
    assert "not empty" in result.output and "--force" in result.output
    assert not (out / "roster.csv").exists()
    result = runner.invoke(app, ["synth", str(out), *TINY, *_quick(tmp_path), "--force"])
    assert result.exit_code == 0, result.output
    assert (out / "notes.txt").read_text() == "mine"  # only the study's own files replaced
    assert (out / "roster.csv").exists()


def test_config_file_sets_the_rest_and_flags_win(tmp_path):
    cfg = tmp_path / "synth.toml"
    cfg.write_text('seed = 99\nstudy_name = "Invented panel"\nsurvey = false\n'
                   'truth_simulation_hours = 4.0\n'
                   '[coding]\ndouble_coded_share = 0.0\n', encoding="utf-8")
    out = tmp_path / "study"
    result = runner.invoke(app, ["synth", str(out), "--config", str(cfg), *TINY])
    assert result.exit_code == 0, result.output
    params = json.loads((out / "truth" / "parameters.json").read_text())
    assert params["options"]["seed"] == 3  # the flag overrides the file
    assert params["options"]["study_name"] == "Invented panel"
    assert not (out / "survey.csv").exists()
    log = pd.read_csv(out / "media_log.csv")
    assert set(log["coder"]) == {"coder_a"}


def test_a_typo_in_the_config_file_is_a_readable_error(tmp_path):
    cfg = tmp_path / "synth.toml"
    cfg.write_text("[clock]\ndrift_pm = 3\n", encoding="utf-8")
    result = runner.invoke(app, ["synth", str(tmp_path / "x"), "--config", str(cfg)])
    assert result.exit_code == 2
    assert "did you mean 'drift_ppm'" in result.output
    assert "Traceback" not in result.output
