"""Options of the small synthetic study the tests here share (see conftest.py)."""

from __future__ import annotations

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
    return options_from_dict({**SMALL, **changes}, "test options")
