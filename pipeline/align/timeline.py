"""Build one session's per-second timeline on the video clock.

Every video second 0 .. duration_s-1 gets one row: the media codes of that second
(or uncoded), its state, and the 1 Hz summary of the sensor samples that the clock
map places inside it. The coded seconds are the unit every metric counts.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from pipeline.align.clock import ClockMap, fit_clock_map
from pipeline.config import SignalSettings
from pipeline.errors import StageError
from pipeline.metrics.states import classify_states
from pipeline.types import SessionInputs, SessionSignals

#: Sample-level columns averaged into each second, with the validity column they obey.
_MEANS = {
    "eda_us": "eda_valid",
    "eda_tonic_us": "eda_valid",
    "eda_phasic_us": "eda_valid",
    "hr_bpm": "hr_valid",
    "motion_g": None,
}


@dataclass
class AlignedSession:
    """The timeline plus what the alignment found out, for QC."""

    timeline: pd.DataFrame
    scrs: pd.DataFrame  # SCRs on the video clock (onset_video_s ...), inside the session
    clock: ClockMap
    flags: list[str] = field(default_factory=list)


def _codes_frame(inputs: SessionInputs) -> pd.DataFrame:
    n = inputs.duration_s
    frame = pd.DataFrame({"second": np.arange(n, dtype=np.int64)})
    codes = inputs.codes[["second", "in_view", "attended"]]
    frame = frame.merge(codes, on="second", how="left", validate="one_to_one")
    frame["coded"] = frame["in_view"].notna()
    frame["in_view"] = frame["in_view"].astype("string")
    frame["attended"] = frame["attended"].astype("string")
    states = classify_states(frame["in_view"])
    return pd.concat([frame, states], axis=1)


def _bin_means(second: np.ndarray, values: np.ndarray, ok: np.ndarray, n: int) -> np.ndarray:
    use = ok & np.isfinite(values)
    sums = np.bincount(second[use], weights=values[use], minlength=n)[:n]
    counts = np.bincount(second[use], minlength=n)[:n]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / counts, np.nan)


def build_timeline(inputs: SessionInputs, signals: SessionSignals | None,
                   cfg: SignalSettings) -> AlignedSession:
    """Join one session's codes and processed signals, second by second.

    Parameters
    ----------
    inputs : SessionInputs
        The session's codes (one coder), duration and sync pairs.
    signals : SessionSignals or None
        The processed recording on the sensor clock; None when the session has none.
    cfg : SignalSettings
        Uses ``eda.min_valid_share``: a second is valid when at least that share of
        the samples expected in it (the sampling rate) is valid.
    """
    key = inputs.key
    clock = fit_clock_map(inputs.sync_pairs)
    if clock.rate <= 0:
        raise StageError("the sync pairs give a sensor clock that runs backwards",
                         unit=key.label(), stage="align",
                         hint="check video_s and sensor_s of this session in sync.csv")
    frame = _codes_frame(inputs)
    n = inputs.duration_s
    frame["sensor_s"] = clock.to_sensor(frame["second"].to_numpy(dtype=float))
    flags = list(clock.flags())
    scrs_video = pd.DataFrame(columns=["onset_video_s", "peak_video_s", "amplitude_us",
                                       "rise_time_s", "half_recovery_s"])
    if signals is None:
        for col in _MEANS:
            frame[col] = np.nan
        frame["scr_onsets"] = 0
        frame["scr_amplitude_sum_us"] = 0.0
        frame["signal_valid"] = False
        frame["hr_valid"] = False
        flags.append("no_recording")
    else:
        s = signals.samples
        video = clock.to_video(s["time_s"].to_numpy(dtype=float))
        sec = np.floor(video).astype(np.int64)
        inside = (sec >= 0) & (sec < n)
        sec_in = sec[inside]
        expected = signals.sampling_rate_hz if np.isfinite(signals.sampling_rate_hz) else 1.0
        for col, valid_col in _MEANS.items():
            if col not in s.columns:
                frame[col] = np.nan
                continue
            vals = s[col].to_numpy(dtype=float)[inside]
            ok = (s[valid_col].to_numpy(dtype=bool)[inside] if valid_col and valid_col in s
                  else np.ones(len(vals), dtype=bool))
            frame[col] = _bin_means(sec_in, vals, ok, n)
        if "eda_valid" in s.columns:
            good = np.bincount(sec_in[s["eda_valid"].to_numpy(dtype=bool)[inside]],
                               minlength=n)[:n]
            frame["signal_valid"] = (good / expected) >= cfg.eda.min_valid_share
        else:
            frame["signal_valid"] = False
        # Heart rate is a slow series, often sampled once a second or once a beat
        # beside faster EDA: a second has valid HR when it holds a valid HR value.
        if "hr_valid" in s.columns and "hr_bpm" in s.columns:
            hr_ok = s["hr_valid"].to_numpy(dtype=bool) & np.isfinite(s["hr_bpm"].to_numpy(float))
            frame["hr_valid"] = np.bincount(sec_in[hr_ok[inside]], minlength=n)[:n] > 0
        else:
            frame["hr_valid"] = False
        scrs = signals.scrs
        onset_v = clock.to_video(scrs["onset_s"].to_numpy(dtype=float))
        keep = (onset_v >= 0) & (onset_v < n)
        scrs_video = pd.DataFrame({
            "onset_video_s": onset_v[keep],
            "peak_video_s": clock.to_video(scrs["peak_s"].to_numpy(dtype=float))[keep],
            "amplitude_us": scrs["amplitude_us"].to_numpy(dtype=float)[keep],
            "rise_time_s": scrs["rise_time_s"].to_numpy(dtype=float)[keep],
            "half_recovery_s": scrs["half_recovery_s"].to_numpy(dtype=float)[keep],
        })
        onset_sec = np.floor(onset_v[keep]).astype(np.int64)
        frame["scr_onsets"] = np.bincount(onset_sec, minlength=n)[:n]
        frame["scr_amplitude_sum_us"] = np.bincount(
            onset_sec, weights=scrs_video["amplitude_us"].to_numpy(), minlength=n)[:n]
        # A second's EDA features only count where the second is valid.
        for col in ("eda_us", "eda_tonic_us", "eda_phasic_us"):
            frame.loc[~frame["signal_valid"], col] = np.nan
        if not inside.any():
            flags.append("recording_outside_session")
    frame.insert(0, "session_id", key.session_id)
    frame.insert(0, "participant_id", key.participant_id)
    frame["arousal"] = np.nan
    return AlignedSession(timeline=frame, scrs=scrs_video, clock=clock, flags=flags)
