"""A short readable summary of a study's coder agreement (used by `agree` and `run`)."""

from __future__ import annotations

import numpy as np


def _pct(x: float) -> str:
    return "n/a" if not np.isfinite(x) else f"{100 * x:.1f} %"


def _num(x: float) -> str:
    return "n/a" if not np.isfinite(x) else f"{x:.2f}"


def summary_lines(study_row: dict, n_sessions: int, n_alpha: int) -> list[str]:
    """A short readable summary of the pooled agreement row."""
    r = study_row
    band = f" ({r['kappa_attended_band']})" if r["kappa_attended_band"] else ""
    sband = f" ({r['kappa_state_band']})" if r["kappa_state_band"] else ""
    lines = [
        f"agreement: {r['sessions']} of {n_sessions} sessions coded by two or more coders "
        f"({r['coder_pairs']} coder pair{'' if r['coder_pairs'] == 1 else 's'}, "
        f"{r['seconds_compared']} seconds compared; "
        f"coders {r['coders'].replace(';', ', ')})",
        f"  attended platform: {_pct(r['agreement_attended'])} agreement, "
        f"Cohen's kappa {_num(r['kappa_attended'])}{band}; per session-pair kappa "
        f"{_num(r['kappa_attended_min'])} to {_num(r['kappa_attended_max'])}, "
        f"median {_num(r['kappa_attended_median'])}",
        f"  state (none/single/multi): {_pct(r['agreement_state'])} agreement, "
        f"Cohen's kappa {_num(r['kappa_state'])}{sband}",
        f"  switches within {r['switch_tolerance_s']} s ({r['switch_matching']} matching): "
        f"{r['switches_matched']} pairs from {r['switches_a']} switches of coder A (first "
        f"in sorted order) and {r['switches_b']} of coder B; "
        f"precision {_num(r['switch_precision'])}, "
        f"recall {_num(r['switch_recall'])}, F1 {_num(r['switch_f1'])}",
    ]
    if n_alpha:
        lines.append(f"  Krippendorff's alpha ({n_alpha} sessions with three or more coders "
                     "in alpha.csv); pooled over every session: attended "
                     f"{_num(r['alpha_attended'])}, state {_num(r['alpha_state'])}")
    return lines


#: Method text of each agreement step, with references, for the report's methods section.
MATCHING_TEXT = {
    "optimal": "one-to-one by an optimal assignment that pairs as many switches as "
               "possible, then the smallest total time difference (Kuhn 1955, Naval Res "
               "Logist Q 2:83-97)",
    "greedy": "one-to-one, closest pairs first",
}


def agreement_methods(tolerance_s: int, matching: str) -> dict[str, str]:
    """Method texts (with references) of the agreement tables that were written."""
    return {
        "agreement_kappa": "per-second Cohen's kappa on the attended platform (each platform "
                           "and none) and on the coarse state (Cohen 1960, Educ Psychol Meas "
                           "20:37-46), read with the bands of Landis & Koch (1977), "
                           "Biometrics 33:159-174",
        "agreement_alpha": "Krippendorff's alpha for nominal codes where three or more "
                           "coders coded a session (Krippendorff 2011, Computing "
                           "Krippendorff's alpha-reliability)",
        "agreement_switches": f"switch events of the second coder matched to the first's "
                              f"within {tolerance_s} s with the same from and to platforms, "
                              f"{MATCHING_TEXT.get(matching, matching)}; precision, recall "
                              "and F1",
    }
