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


def recount_switches(seconds: list[int], attended: list[str], max_gap_s: int = 3) -> int:
    """Switches by CONTRACT §2, a plain loop over one coder's rows of one session."""
    coded = set(seconds)
    bouts: list[list] = []  # [platform, start, end)
    prev = None
    for sec, att in zip(seconds, attended):
        if att:
            if bouts and bouts[-1][0] == att and bouts[-1][2] == sec and prev == sec - 1:
                bouts[-1][2] = sec + 1
            else:
                bouts.append([att, sec, sec + 1])
        prev = sec
    count = 0
    for (p1, _, e1), (p2, s2, _) in zip(bouts, bouts[1:]):
        gap = range(e1, s2)
        if p1 != p2 and len(gap) <= max_gap_s and all(g in coded for g in gap):
            count += 1
    return count
