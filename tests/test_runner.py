"""`run` end to end on a tiny invented study: contract outputs, cache, failures, safety."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent / "ingest"))
from ingest_builders import TOML, tree_hashes, write_study  # noqa: E402

from pipeline.cli import app  # noqa: E402
from pipeline.errors import EXIT_INPUT, EXIT_PARTIAL, EXIT_STAGE  # noqa: E402

# CONTRACT §3: the columns each table has at least
CONTRACT_COLUMNS = {
    "metrics/sessions.csv": ["participant_id", "session_id", "cohort", "coded_hours",
                             "media_hours", "multi_hours", "switches", "switches_per_hour",
                             "eda_valid_fraction", "compression_ratio"],
    "metrics/states.csv": ["participant_id", "session_id", "cohort", "state", "seconds",
                           "arousal_mean", "arousal_p05", "arousal_p95", "arousal_range",
                           "scr_per_min"],
    "metrics/platforms.csv": ["participant_id", "session_id", "cohort", "platform", "group",
                              "in_view_seconds", "attended_seconds", "bouts",
                              "dwell_median_s"],
    "models/comparisons.csv": ["outcome", "model", "term", "estimate", "std_error", "ci_low",
                               "ci_high", "p_value", "p_fdr", "n_participants", "n_obs",
                               "scale"],
    "qc/sessions.csv": ["participant_id", "session_id", "coverage", "sync_residual_s",
                        "flags"],
}

runner = CliRunner()


def _run(study, out, *extra):
    return runner.invoke(app, ["run", str(study), "--out", str(out), "--workers", "1",
                               "--quiet", "--no-report", *extra])


@pytest.fixture
def study(tmp_path):
    return write_study(tmp_path / "study")


def test_run_writes_the_contract_tables(study, tmp_path):
    before = tree_hashes(study)
    res = _run(study, tmp_path / "out")
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    for rel, cols in CONTRACT_COLUMNS.items():
        df = pd.read_csv(out / rel)
        missing = [c for c in cols if c not in df.columns]
        assert not missing, f"{rel} lacks {missing}"
    sessions = pd.read_csv(out / "metrics/sessions.csv")
    assert len(sessions) == 2  # one row per participant-session
    assert len(pd.read_csv(out / "metrics/states.csv")) == 6  # 3 coarse states each
    timeline = pd.read_parquet(out / "timeline" / "p01__s1.parquet")
    assert len(timeline) == 20 and {"state", "arousal", "signal_valid"} <= set(timeline)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["sessions_ok"] == manifest["sessions_total"] == 2
    assert set(manifest["inputs"]) >= {"roster.csv", "sessions.csv", "media_log.csv"}
    assert all(len(h["sha256"]) == 64 for h in manifest["outputs"].values())
    assert "metrics/sessions.csv" in manifest["outputs"]
    assert manifest["config"]["switching"]["max_gap_s"] == 3
    assert "ran 2 of 2 sessions" in res.output
    assert tree_hashes(study) == before  # nothing the user gave is modified


def test_rerun_uses_the_cache_and_fresh_ignores_it(study, tmp_path):
    out = tmp_path / "out"
    assert _run(study, out).exit_code == 0
    first = pd.read_csv(out / "metrics/sessions.csv")
    res = _run(study, out)
    assert "(2 from cache)" in res.output
    pd.testing.assert_frame_equal(first, pd.read_csv(out / "metrics/sessions.csv"))
    res = _run(study, out, "--fresh")
    assert "from cache" not in res.output


def test_changed_recording_invalidates_only_its_session(study, tmp_path):
    out = tmp_path / "out"
    assert _run(study, out).exit_code == 0
    rec = study / "signals" / "p02__s1.parquet"
    df = pd.read_parquet(rec)
    df["eda_us"] = df["eda_us"] + 1.0
    df.to_parquet(rec, index=False)
    res = _run(study, out)
    assert "(1 from cache)" in res.output


def test_recoded_media_log_keeps_the_signals_cached(study, tmp_path):
    # the signal work needs no media codes (its cache key holds none): recoding a
    # session reuses every session's signals, and the metrics follow the new codes
    out = tmp_path / "out"
    assert _run(study, out).exit_code == 0
    log = pd.read_csv(study / "media_log.csv", keep_default_na=False, dtype=str)
    log["in_view"] = ""
    log["attended"] = ""
    log.to_csv(study / "media_log.csv", index=False)
    res = _run(study, out)
    assert res.exit_code == 0, res.output
    assert "(2 from cache)" in res.output
    sessions = pd.read_csv(out / "metrics/sessions.csv")
    assert (sessions["media_hours"] == 0).all() and (sessions["switches"] == 0).all()


@pytest.mark.parametrize("workers", ["1", "2"])
def test_media_log_problem_refuses_the_run_while_signals_were_queued(study, tmp_path,
                                                                     workers):
    # the signals start before the media log is read; its problems still refuse the run,
    # with the input error's exit code and the file, line and column named
    text = (study / "media_log.csv").read_text().splitlines()
    cells = text[1].split(",")
    cells[2] = "minus one"  # the second column
    text[1] = ",".join(cells)
    (study / "media_log.csv").write_text("\n".join(text) + "\n")
    res = runner.invoke(app, ["run", str(study), "--out", str(tmp_path / "out"), "--workers",
                              workers, "--quiet", "--no-report"])
    assert res.exit_code == EXIT_INPUT, res.output
    assert "media_log.csv" in res.output and "minus one" in res.output
    assert not (tmp_path / "out" / "metrics").exists()


def _break_one_session(study):
    # a recording whose time axis is not numeric: read_recording refuses it
    pd.DataFrame({"time_s": ["a", "b"], "eda_us": [1.0, 2.0]}).to_parquet(
        study / "signals" / "p02__s1.parquet", index=False)


def test_failing_session_stops_the_run_and_is_named(study, tmp_path):
    _break_one_session(study)
    res = _run(study, tmp_path / "out")
    assert res.exit_code == EXIT_STAGE
    assert "p02/s1" in res.output and "--keep-going" in res.output


def test_keep_going_reports_partial_success(study, tmp_path):
    _break_one_session(study)
    res = _run(study, tmp_path / "out", "--keep-going")
    assert res.exit_code == EXIT_PARTIAL, res.output
    assert "ran 1 of 2 sessions" in res.output
    assert "failed: p02/s1" in res.output
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert manifest["failures"][0]["session_id"] == "s1"
    assert len(pd.read_csv(tmp_path / "out" / "metrics/sessions.csv")) == 1


def test_keep_going_on_two_workers_reports_partial_success(study, tmp_path):
    _break_one_session(study)
    res = runner.invoke(app, ["run", str(study), "--out", str(tmp_path / "out"), "--workers",
                              "2", "--quiet", "--no-report", "--keep-going"])
    assert res.exit_code == EXIT_PARTIAL, res.output
    assert "ran 1 of 2 sessions" in res.output
    assert len(pd.read_csv(tmp_path / "out" / "metrics/sessions.csv")) == 1


def test_parallel_run_matches_serial(study, tmp_path):
    assert _run(study, tmp_path / "a").exit_code == 0
    res = runner.invoke(app, ["run", str(study), "--out", str(tmp_path / "b"), "--workers",
                              "2", "--quiet", "--no-report"])
    assert res.exit_code == 0, res.output
    for rel in ("metrics/sessions.csv", "metrics/states.csv", "qc/sessions.csv"):
        pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "a" / rel),
                                      pd.read_csv(tmp_path / "b" / rel))


def test_cohort_include_setting_reaches_the_survey_comparison(tmp_path):
    # [cohorts] include = ["beta"]: the survey is compared over beta alone (so untested),
    # not with alpha as the reference, as the models leave alpha out too.
    study = write_study(tmp_path / "study", toml=TOML + '\n[cohorts]\ninclude = ["beta"]\n')
    res = _run(study, tmp_path / "out")
    assert res.exit_code == 0, res.output
    survey = pd.read_csv(tmp_path / "out" / "models/survey.csv")
    assert set(survey["reference"]) == {"beta"}
    assert survey["note"].str.contains("fewer than two cohorts compared").all()


def test_run_help():
    res = runner.invoke(app, ["run", "--help"])
    assert res.exit_code == 0 and "--keep-going" in res.output and "--workers" in res.output


def test_root_help_lists_commands():
    res = runner.invoke(app, ["--help"])
    assert res.exit_code == 0
    for cmd in ("run", "check"):
        assert cmd in res.output


@pytest.mark.slow
def test_run_on_a_local_dask_cluster_matches_serial(study, tmp_path):
    from distributed import LocalCluster

    from pipeline.runner import run_study

    run_study(study, tmp_path / "serial", workers=1, quiet=True, report=False)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster:
        res = run_study(study, tmp_path / "dask", cluster=cluster.scheduler_address,
                        quiet=True, report=False)
    assert res.sessions_ok == 2
    for rel in ("metrics/sessions.csv", "metrics/states.csv", "metrics/platforms.csv",
                "metrics/bouts.csv", "qc/sessions.csv", "models/comparisons.csv"):
        a = (tmp_path / "serial" / rel).read_bytes()
        b = (tmp_path / "dask" / rel).read_bytes()
        assert a == b, rel  # byte-identical tables
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "serial/timeline/p01__s1.parquet"),
                                  pd.read_parquet(tmp_path / "dask/timeline/p01__s1.parquet"))


def test_command_line_starts_without_the_scientific_stack():
    # `run --workers N` starts the workers' fork server before it imports pandas, so the
    # command line itself must import none of the heavy libraries (common practice:
    # keep a CLI's start-up light; measured here by what is in sys.modules)
    import subprocess
    import sys

    code = ("import sys, pipeline.cli; "
            "print(sorted(m for m in ('pandas', 'numpy', 'scipy', 'pydantic', 'pyarrow') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True).stdout
    assert out.strip() == "[]"
