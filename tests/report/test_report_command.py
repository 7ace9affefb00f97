"""`screenweave report OUT` through the CLI."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from pipeline.cli import app

runner = CliRunner()


def test_help_names_the_command_and_its_option():
    res = runner.invoke(app, ["report", "--help"])
    assert res.exit_code == 0
    assert "Rebuild" in res.output and "--session" in res.output


def test_a_folder_that_is_not_a_run_is_refused_with_exit_2(tmp_path):
    res = runner.invoke(app, ["report", str(tmp_path)])
    assert res.exit_code == 2
    assert "manifest.json" in res.output and "screenweave run" in res.output


@pytest.mark.slow
def test_report_rebuilds_charts_page_and_deck_without_the_pipeline(tmp_path):
    from report_run import write_run

    out = write_run(tmp_path / "out", hostile=False)
    res = runner.invoke(app, ["report", str(out), "--session", "p05/s2"])
    assert res.exit_code == 0, res.output
    assert "10 charts" in res.output
    for rel in ("report.html", "deck.pptx", "charts/timeline.png", "charts/index.csv"):
        assert (out / rel).is_file()
    assert "Session p05/s2:" in (out / "report.html").read_text()


def test_unknown_timeline_session_is_a_config_error(tmp_path):
    from report_run import write_run

    out = write_run(tmp_path / "out", hostile=False, optional=False)
    res = runner.invoke(app, ["report", str(out), "--session", "p99/s9"])
    assert res.exit_code == 2
    assert "p99/s9" in res.output and "hint" in res.output
