"""End to end: ``run`` on a synthetic study with artifacts and clock drift recovers the
compression ratios the generator built in (within 0.05), and QC carries the share of
every artifact rule."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.runner import run_study
from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import ArtifactOptions, SynthOptions

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def study_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("e2e")
    # every artifact kind present: electrode-off and clipping more often than the
    # generator's defaults, so that a few sessions surely have them
    artifacts = ArtifactOptions(flatline_rate_per_hour=1.0, clipping_rate_per_hour=1.0)
    opts = SynthOptions(participants_per_cohort=2, sessions_per_participant=2,
                        session_hours=1.5, seed=11, artifacts=artifacts)
    generate_study(root / "study", opts)
    result = run_study(root / "study", root / "out", quiet=True, report=False,
                       log=lambda line: None)
    return root, result


def test_compression_ratios_are_recovered(study_run):
    root, result = study_run
    assert result.sessions_ok == result.sessions_total == 8
    truth = pd.read_csv(root / "study" / "truth" / "sessions.csv")
    got = pd.read_csv(root / "out" / "metrics" / "sessions.csv")
    both = got.merge(truth, on=["participant_id", "session_id"], suffixes=("", "_truth"))
    assert len(both) == 8
    # the study really has drifting clocks and artifacts of every kind
    assert (both["drift_ppm"].abs() > 5).all()
    kinds = pd.read_csv(root / "study" / "truth" / "artifacts.csv")["kind"].unique()
    assert set(kinds) >= {"dropout", "spike", "motion", "flatline", "clipping"}
    err = (both["compression_ratio"] - both["compression_ratio_true"]).abs()
    assert np.isfinite(err).all()
    assert err.max() <= 0.05


def test_qc_reports_each_rules_share(study_run):
    root, _ = study_run
    qc = pd.read_csv(root / "out" / "qc" / "sessions.csv")
    for rule in ("missing", "out_of_range", "flat_line", "jump", "clipping", "motion",
                 "transition", "total", "interpolated"):
        assert f"invalid_share_{rule}" in qc.columns
    # electrode-off stretches read 0 uS and clipped ones the range end: the rules see them
    assert (qc["invalid_share_flat_line"] > 0).any()
    assert (qc["invalid_share_clipping"] > 0).any()
    assert (qc["invalid_share_out_of_range"] > 0).any()
