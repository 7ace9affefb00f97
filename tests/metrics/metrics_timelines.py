"""Hand-made per-second timelines for the metrics tests.

A timeline is written as a short spec, one character per second:
a letter is the attended platform (``t`` tv, ``p`` phone, ``l`` laptop, ``m`` magazine),
``.`` is a coded second with nothing attended, ``?`` an uncoded second.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.metrics.states import classify_states
from pipeline.types import TIMELINE_COLUMNS

CODES = {"t": "tv", "p": "phone", "l": "laptop", "m": "magazine"}


def build_timeline(spec: str, *, in_view: list[str | None] | None = None,
                   valid: str | None = None, arousal=None, eda=None,
                   scr_onsets=None, scr_amplitude=None, hr=None, hr_valid=None,
                   participant_id: str = "p01", session_id: str = "s1") -> pd.DataFrame:
    """A timeline from a spec (see module docstring).

    ``in_view`` gives each second's ';'-joined codes (default: the attended platform
    alone, '' for none, None where uncoded). ``valid`` is a string of '1'/'0' for
    signal_valid (default all valid).
    """
    n = len(spec)
    coded = np.array([c != "?" for c in spec])
    attended = [None if c == "?" else ("" if c == "." else CODES[c]) for c in spec]
    if in_view is None:
        in_view = attended
    iv = pd.Series(in_view, dtype="string")
    states = classify_states(iv)
    sig = np.ones(n, bool) if valid is None else np.array([c == "1" for c in valid])
    assert len(sig) == n and len(iv) == n
    eda_v = np.full(n, 5.0) if eda is None else np.asarray(eda, float)
    df = pd.DataFrame({
        "participant_id": participant_id,
        "session_id": session_id,
        "second": np.arange(n),
        "coded": coded,
        "in_view": iv,
        "attended": pd.Series(attended, dtype="string"),
        "n_in_view": states["n_in_view"],
        "state": states["state"],
        "fine_state": states["fine_state"],
        "sensor_s": np.arange(n, dtype=float),
        "eda_us": eda_v,
        "eda_tonic_us": eda_v * 0.9,
        "eda_phasic_us": eda_v * 0.1,
        "scr_onsets": np.zeros(n, int) if scr_onsets is None else np.asarray(scr_onsets),
        "scr_amplitude_sum_us": (np.zeros(n) if scr_amplitude is None
                                 else np.asarray(scr_amplitude, float)),
        "hr_bpm": np.full(n, 70.0) if hr is None else np.asarray(hr, float),
        "motion_g": np.zeros(n),
        "signal_valid": sig,
        "hr_valid": sig.copy() if hr_valid is None else np.asarray(hr_valid, bool),
        "arousal": (np.where(sig, 0.0, np.nan) if arousal is None
                    else np.asarray(arousal, float)),
    })
    assert list(df.columns) == list(TIMELINE_COLUMNS)
    return df
