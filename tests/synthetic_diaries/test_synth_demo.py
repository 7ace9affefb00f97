"""The committed demo study: small, complete, loadable, and regenerable byte for byte."""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pipeline.config import read_toml, resolve_study
from pipeline.ingest import load_study
from synth_fixtures import recount_switches
from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import load_options

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "synthetic_diaries" / "demo"
OPTIONS = ROOT / "synthetic_diaries" / "demo_options.toml"
RUN_CONFIG = ROOT / "configs" / "demo.toml"


def _study_files(folder: Path) -> list[Path]:
    return sorted(p.relative_to(folder) for p in folder.rglob("*")
                  if p.is_file() and p.name != "README.md")


def test_demo_is_at_most_25_mb_on_disk():
    blocks = sum(os.stat(p).st_blocks * 512 for p in DEMO.rglob("*") if p.is_file())
    assert blocks <= 25 * 2**20


def test_demo_shape():
    roster = pd.read_csv(DEMO / "roster.csv")
    sessions = pd.read_csv(DEMO / "sessions.csv")
    truth = pd.read_csv(DEMO / "truth" / "sessions.csv")
    assert 12 <= len(roster) <= 16
    assert roster["cohort"].value_counts().to_dict() == {"early_adopters": 6, "late_adopters": 6}
    assert sessions.groupby("participant_id").size().eq(3).all()
    assert truth["duration_s"].between(1.5 * 3600, 2.0 * 3600).all()
    assert truth["double_coded"].sum() >= 4
    assert (truth["artifacts"] > 0).any() and (truth["uncoded_seconds"] > 0).any()
    assert truth["drift_ppm"].abs().gt(0).all()


def test_every_demo_session_has_its_metrics_defined():
    # CONTRACT §2: >= 5 multi minutes for a switch rate, >= 10 valid minutes of a state
    truth = pd.read_csv(DEMO / "truth" / "sessions.csv")
    assert (truth["multi_seconds"] >= 5 * 60).all()
    assert (truth["single_valid_seconds"] >= 10 * 60).all()
    assert (truth["multi_valid_seconds"] >= 10 * 60).all()
    assert truth["compression_ratio_true"].notna().all()
    assert truth["switches_per_hour"].notna().all()


@pytest.mark.slow
def test_run_config_names_the_demo_and_repeats_its_settings():
    folder, cfg, _ = resolve_study(RUN_CONFIG)
    assert folder == DEMO.resolve()
    run = read_toml(RUN_CONFIG)
    run["study"].pop("data_dir")
    assert run == read_toml(DEMO / "study.toml")
    study = load_study(folder, cfg)
    assert study.warnings == []
    assert len(study.recordings) == 36


def test_demo_truth_switches_match_the_media_log_for_a_few_sessions():
    log = pd.read_csv(DEMO / "media_log.csv", dtype={"in_view": str, "attended": str},
                      keep_default_na=False)
    log = log[log["coder"] == "coder_a"]
    truth = pd.read_csv(DEMO / "truth" / "sessions.csv")
    for row in truth.iloc[[0, 17, 35]].itertuples():
        rows = log[(log["participant_id"] == row.participant_id)
                   & (log["session_id"] == row.session_id)].sort_values("second")
        assert recount_switches(rows["second"].tolist(), rows["attended"].tolist()) \
            == row.switches


def test_demo_readme_gives_the_command_and_seed_that_made_it():
    text = (DEMO / "README.md").read_text(encoding="utf-8")
    assert ("screenweave synth synthetic_diaries/demo --config "
            "synthetic_diaries/demo_options.toml --force") in text
    seed = tomllib.loads(OPTIONS.read_text(encoding="utf-8"))["seed"]
    assert f"seed {seed}" in text
    assert "invented" in text.lower()


def _same_table(a: pd.DataFrame, b: pd.DataFrame, rel: Path) -> None:
    assert list(a.columns) == list(b.columns), rel
    for col in a.columns:
        if pd.api.types.is_float_dtype(a[col]):
            np.testing.assert_allclose(b[col].to_numpy(), a[col].to_numpy(), rtol=1e-12,
                                       atol=0, err_msg=f"{rel}:{col}")
        else:
            assert a[col].equals(b[col]), f"{rel}:{col}"


@pytest.mark.slow
def test_demo_regenerates_from_its_options(tmp_path):
    # The study's inputs must come back byte for byte. The truth tables are derived
    # with transcendental functions (exp, log) whose last bit can differ between CPUs
    # (numpy picks SIMD code paths per machine), so their floats are compared to
    # 1e-12 relative, far below anything a test or a reader could notice.
    out = generate_study(tmp_path / "demo", load_options(OPTIONS))
    files = _study_files(DEMO)
    assert files == _study_files(out)
    for rel in files:
        if rel.parts[0] == "truth" and rel.suffix in (".csv", ".parquet"):
            read = pd.read_csv if rel.suffix == ".csv" else pd.read_parquet
            _same_table(read(DEMO / rel), read(out / rel), rel)
        else:
            assert (DEMO / rel).read_bytes() == (out / rel).read_bytes(), rel
