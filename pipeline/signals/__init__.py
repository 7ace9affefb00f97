"""Signals stage: one session's recording, cleaned and scored, on the sensor clock.

Entry point: :func:`process_recording` (a pure function of a Recording and the
``[signals]`` settings). The align stage then maps the result onto video seconds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.config import SignalSettings
from pipeline.types import Recording, SessionSignals


def process_recording(rec: Recording, cfg: SignalSettings) -> SessionSignals:
    """Mark impossible skin conductance invalid; keep the rest as recorded.

    A sample is invalid when it is missing, at or below ``eda.min_us`` or above
    ``eda.max_us`` (non-positive conductance is physically impossible; see
    configs/defaults.toml for the ceiling's source).
    """
    eda = rec.channels["eda_us"].astype(float)
    missing = ~np.isfinite(eda)
    out_of_range = ~missing & ((eda <= cfg.eda.min_us) | (eda > cfg.eda.max_us))
    valid = ~(missing | out_of_range)
    n = max(len(eda), 1)
    samples = pd.DataFrame({
        "time_s": rec.time_s,
        "eda_us": np.where(valid, eda, np.nan),
        "eda_tonic_us": np.nan,
        "eda_phasic_us": np.nan,
        "eda_valid": valid,
    })
    if "hr_bpm" in rec.channels:
        hr = rec.channels["hr_bpm"]
        samples["hr_bpm"] = hr
        samples["hr_valid"] = np.isfinite(hr)
    scrs = pd.DataFrame(columns=["onset_s", "peak_s", "amplitude_us", "rise_time_s",
                                 "half_recovery_s"], dtype=float)
    return SessionSignals(
        samples=samples,
        scrs=scrs,
        invalid_share={"missing": missing.sum() / n, "out_of_range": out_of_range.sum() / n},
        methods={"eda_validity": "range"},
        sampling_rate_hz=rec.sampling_rate_hz,
    )
