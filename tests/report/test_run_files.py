"""Reading a run folder: clear refusals, IDs kept as typed, optional tables optional."""

from __future__ import annotations

import json
import shutil

import pytest

from pipeline.errors import InputError
from pipeline.report.charts import build_figures
from pipeline.report import run_palette
from pipeline.report.run_files import read_run
from report_run import HOSTILE_CODE, HOSTILE_STUDY, write_run


def test_not_a_folder_and_no_manifest_are_refused_with_a_hint(tmp_path):
    with pytest.raises(InputError, match="is not a folder"):
        read_run(tmp_path / "nope")
    (tmp_path / "metrics").mkdir()
    with pytest.raises(InputError, match="manifest.json: is missing") as err:
        read_run(tmp_path)
    assert "screenweave run" in err.value.problems[0].hint


def test_sessions_table_is_required(tmp_path):
    out = write_run(tmp_path / "out")
    (out / "metrics" / "sessions.csv").unlink()
    with pytest.raises(InputError, match="sessions.csv"):
        read_run(out)


def test_bad_manifest_is_refused(tmp_path):
    out = write_run(tmp_path / "out")
    (out / "manifest.json").write_text("{not json", encoding="utf-8")
    with pytest.raises(InputError, match="not valid JSON"):
        read_run(out)


def test_ids_stay_text_and_vocabulary_order_comes_from_the_config(tmp_path):
    out = write_run(tmp_path / "out")
    sessions = (out / "metrics/sessions.csv")
    text = sessions.read_text().replace("p01,", "007,")
    sessions.write_text(text)
    run = read_run(out)
    assert "007" in set(run.tables["sessions"]["participant_id"])
    assert run.study_name == HOSTILE_STUDY
    assert run.vocabulary == ["tv", "phone", HOSTILE_CODE]
    assert run.cohorts == ["adult", "teen"]
    assert run.tables["qc"]["usable"].dtype == "boolean"


def test_reference_cohort_goes_first(tmp_path):
    out = write_run(tmp_path / "out")
    m = json.loads((out / "manifest.json").read_text())
    m["config"]["cohorts"]["reference"] = "teen"
    (out / "manifest.json").write_text(json.dumps(m))
    assert read_run(out).cohorts == ["teen", "adult"]


def test_missing_tables_leave_their_charts_out_with_the_reason(tmp_path):
    out = write_run(tmp_path / "out", optional=False)
    (out / "metrics" / "switch_locked.csv").unlink()
    (out / "metrics" / "bouts.csv").write_text("participant_id,session_id,platform\n"
                                               "p01,s1,tv\n")
    shutil.rmtree(out / "models")
    run = read_run(out)
    figures, omitted = build_figures(run, run_palette(run))
    assert omitted["switch_locked"] == "metrics/switch_locked.csv was not written by this run"
    assert "none of the columns 'duration_s'" in omitted["dwell"]
    assert "screenweave power" in omitted["power"] and "screenweave agree" in omitted["agreement"]
    assert "comparisons.csv was not written" in omitted["effects"]
    names = [f.name for f in figures]
    assert names == ["timeline", "switch_rate", "time_budget", "state_arousal", "quality"]
    rate = next(f for f in figures if f.name == "switch_rate")
    # without a model the switch-rate chart says so instead of showing an estimate
    assert rate.detail.startswith("no model estimate") and not rate.from_model


def test_power_table_written_by_the_power_command_is_found(tmp_path):
    # `screenweave power --out OUT` writes OUT/power.csv; OUT/power/power.csv also works
    out = write_run(tmp_path / "out")
    (out / "power" / "power.csv").rename(out / "power.csv")
    run = read_run(out)
    assert run.has("power") and "power" not in run.missing
