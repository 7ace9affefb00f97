"""`run` on a synthetic study recovers the truth the generator computed from what it made.

The generator (synthetic_diaries) counts switches from its own bout list and computes
the compression ratio from the clean 1 Hz skin conductance on the video clock, before
noise, clock offset and drift; the pipeline sees only the contract files.
"""

from __future__ import annotations

import pandas as pd
import pytest

from pipeline.runner import run_study
from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import SynthOptions


pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def recovered(tmp_path_factory):
    base = tmp_path_factory.mktemp("truth")
    opts = SynthOptions(seed=7, participants_per_cohort=3, sessions_per_participant=2,
                        session_hours=1.0, session_hours_spread=0.0, sampling_rate_hz=8.0)
    # no artifacts; uncoded stretches, clock offset and drift stay in
    opts = opts.model_copy(update={"artifacts": opts.artifacts.without()})
    study = generate_study(base / "study", opts)
    run_study(study, base / "out", workers=1, quiet=True, report=False, log=lambda s: None)
    truth = pd.read_csv(study / "truth" / "sessions.csv")
    got = pd.read_csv(base / "out" / "metrics" / "sessions.csv")
    return truth.merge(got, on=["participant_id", "session_id"], suffixes=("_true", ""))


def test_every_session_is_compared(recovered):
    assert len(recovered) == 12


def test_switch_counts_are_exact(recovered):
    assert (recovered["switches_true"] == recovered["switches"]).all()


def test_coded_and_multi_time_to_the_second(recovered):
    assert (recovered["coded_seconds_true"] == recovered["coded_seconds"]).all()
    assert (recovered["multi_seconds_true"] == recovered["multi_seconds"]).all()
    assert (recovered["media_seconds_true"] == recovered["media_seconds"]).all()


def test_compression_ratio_within_0_05(recovered):
    both = recovered.dropna(subset=["compression_ratio_true", "compression_ratio"])
    assert len(both) >= 10  # the design leaves at least 10 valid minutes of each state
    err = (both["compression_ratio"] - both["compression_ratio_true"]).abs()
    assert err.max() < 0.05, both[["participant_id", "session_id", "compression_ratio_true",
                                   "compression_ratio"]]
