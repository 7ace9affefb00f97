"""A small synthetic study, generated once per test session, shared by the tests here."""

from __future__ import annotations

from pathlib import Path

import pytest

from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import SynthOptions, options_from_dict

#: Small but complete: two cohorts, double coding, every artifact kind, uncoded stretches.
SMALL = {
    "seed": 7,
    "participants_per_cohort": 2,
    "sessions_per_participant": 2,
    "session_hours": 0.7,
    "sampling_rate_hz": 8.0,
    "truth_simulation_hours": 8.0,
    "coding": {"double_coded_share": 0.5},
    "uncoded": {"rate_per_hour": 4.0},
    "artifacts": {"dropout_rate_per_hour": 4.0, "spike_rate_per_hour": 6.0,
                  "motion_rate_per_hour": 6.0, "flatline_rate_per_hour": 3.0,
                  "clipping_rate_per_hour": 3.0},
}


def small_options(**changes) -> SynthOptions:
    data = {**SMALL, **changes}
    return options_from_dict(data, "test options")


@pytest.fixture(scope="session")
def small_opts() -> SynthOptions:
    return small_options()


@pytest.fixture(scope="session")
def small_study(tmp_path_factory, small_opts) -> Path:
    return generate_study(tmp_path_factory.mktemp("small_study"), small_opts)
