"""A generated study follows the study data contract, loads, and is deterministic."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pipeline.config import parse_config, resolve_study
from pipeline.ingest import load_study, read_recording_checked
from synthetic_diaries.generator import SURVEY_ITEMS, generate_study

from synth_fixtures import small_options

ID = re.compile(r"[A-Za-z0-9_-]{1,64}")  # CONTRACT §1 ID rule


def _csv(study: Path, name: str) -> pd.DataFrame:
    return pd.read_csv(study / name, dtype=str, keep_default_na=False)


def test_same_seed_same_bytes_other_seed_other_codes(tmp_path, small_opts, small_study):
    again = generate_study(tmp_path / "again", small_opts)
    files = sorted(p.relative_to(small_study) for p in small_study.rglob("*") if p.is_file())
    assert files == sorted(p.relative_to(again) for p in again.rglob("*") if p.is_file())
    assert len(files) > 10
    for rel in files:
        assert (small_study / rel).read_bytes() == (again / rel).read_bytes(), rel
    other = generate_study(tmp_path / "other", small_options(seed=8))
    assert (other / "media_log.csv").read_bytes() != (small_study / "media_log.csv").read_bytes()


def test_roster_and_sessions_follow_the_contract(small_study, small_opts):
    roster = _csv(small_study, "roster.csv")
    assert list(roster.columns[:2]) == ["participant_id", "cohort"]
    assert roster["participant_id"].is_unique
    assert roster["participant_id"].str.fullmatch(ID.pattern).all()
    assert roster["participant_id"].iloc[0] == "p01"
    assert set(roster["cohort"]) == {c.name for c in small_opts.cohorts}
    assert {"birth_year", "household_id"} <= set(roster.columns)

    sessions = _csv(small_study, "sessions.csv")
    assert set(sessions["participant_id"]) == set(roster["participant_id"])
    assert not sessions.duplicated(["participant_id", "session_id"]).any()
    # ISO 8601 with a UTC offset, evenings in the study's zone
    iso = r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}[+-]\d{2}:\d{2}"
    assert sessions["start"].str.fullmatch(iso).all() and sessions["end"].str.fullmatch(iso).all()
    start = pd.to_datetime(sessions["start"], utc=True)
    end = pd.to_datetime(sessions["end"], utc=True)
    local = start.dt.tz_convert(small_opts.timezone)
    assert (local.dt.hour >= 18).all() and (local.dt.hour <= 21).all()
    assert (end > start).all()


def test_media_log_follows_the_contract(small_study, small_opts):
    log = _csv(small_study, "media_log.csv")
    assert list(log.columns) == ["participant_id", "session_id", "second", "in_view",
                                 "attended", "coder"]
    sessions = _csv(small_study, "sessions.csv")
    dur = ((pd.to_datetime(sessions["end"], utc=True) - pd.to_datetime(sessions["start"], utc=True))
           .dt.total_seconds().astype(int))
    duration = dict(zip(zip(sessions["participant_id"], sessions["session_id"]), dur))
    assert set(zip(log["participant_id"], log["session_id"])) == set(duration)
    second = log["second"].astype(int)
    limit = np.array([duration[k] for k in zip(log["participant_id"], log["session_id"])])
    assert (second >= 0).all() and (second < limit).all()
    assert not log.duplicated(["participant_id", "session_id", "second", "coder"]).any()
    vocab = set(small_opts.platform_groups)
    for iv, att in zip(log["in_view"], log["attended"]):
        codes = iv.split(";") if iv else []
        assert codes == sorted(codes) and set(codes) <= vocab
        assert att == "" or att in codes
    assert set(log["coder"]) == {"coder_a", "coder_b"}
    # coder_a codes every session; uncoded stretches leave seconds out
    a = log[log["coder"] == "coder_a"]
    assert set(zip(a["participant_id"], a["session_id"])) == set(duration)
    assert len(a) < sum(duration.values())


def test_signals_sync_and_survey_follow_the_contract(small_study, small_opts):
    sessions = _csv(small_study, "sessions.csv")
    for p, s in zip(sessions["participant_id"], sessions["session_id"]):
        frame = pd.read_parquet(small_study / "signals" / f"{p}__{s}.parquet")
        assert list(frame.columns) == ["time_s", "eda_us", "hr_bpm", "acc_x", "acc_y", "acc_z"]
        assert frame["time_s"].dtype == np.float64
        assert (np.diff(frame["time_s"].to_numpy()) > 0).all()
        assert frame["time_s"].iloc[0] == 0.0
    sync = _csv(small_study, "sync.csv")
    assert list(sync.columns) == ["participant_id", "session_id", "video_s", "sensor_s"]
    per = sync.groupby(["participant_id", "session_id"]).size()
    assert len(per) == len(sessions) and per.between(2, 3).all()
    survey = _csv(small_study, "survey.csv")
    assert list(survey.columns) == ["participant_id", "item", "value"]
    assert survey["value"].astype(int).between(1, 7).all()
    settings = tomllib.loads((small_study / "study.toml").read_text(encoding="utf-8"))
    assert set(survey["item"]) == set(settings["survey"]["items"]) == set(SURVEY_ITEMS)


def test_study_toml_is_a_valid_screenweave_configuration(small_study, small_opts):
    data = tomllib.loads((small_study / "study.toml").read_text(encoding="utf-8"))
    cfg = parse_config(data, "study.toml")  # the pipeline's own schema, unknown keys refused
    assert cfg.study.timezone == small_opts.timezone
    assert cfg.platforms.groups == small_opts.platform_groups
    assert set(cfg.platforms.groups.values()) == {"screen", "print"}
    assert cfg.coding.primary_coder == "coder_a"


def test_the_study_loads_with_the_pipelines_ingest(small_study):
    folder, cfg, _ = resolve_study(small_study)
    study = load_study(folder, cfg)
    assert len(study.sessions) == 8 and len(study.recordings) == 8
    assert study.vocabulary_declared
    assert study.warnings == []
    truth = pd.read_csv(small_study / "truth" / "sessions.csv")
    assert study.sessions["duration_s"].tolist() == truth["duration_s"].tolist()
    key = study.session_keys()[0]
    rec = read_recording_checked(study.recordings[key], cfg.signals)
    assert rec.sampling_rate_hz == pytest.approx(8.0)
    assert {"eda_us", "hr_bpm", "acc_x"} <= set(rec.channels)
