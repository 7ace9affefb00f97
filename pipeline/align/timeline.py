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
from pipeline.types import TEXT, TIMELINE_COLUMNS, SessionInputs, SessionKey, SessionSignals

#: Sample-level columns averaged into each second, with the validity column they obey.
_MEANS = {
    "eda_us": "eda_valid",
    "eda_tonic_us": "eda_valid",
    "eda_phasic_us": "eda_valid",
    "hr_bpm": "hr_valid",
    "motion_g": None,
}


@dataclass
class AlignedSignals:
    """The recording half of a session's timeline: what needs no media codes."""

    columns: pd.DataFrame  # per video second: sensor_s, then the signal columns
    scrs: pd.DataFrame  # SCRs on the video clock (onset_video_s ...), inside the session
    clock: ClockMap
    flags: list[str] = field(default_factory=list)


@dataclass
class AlignedSession:
    """The timeline plus what the alignment found out, for QC."""

    timeline: pd.DataFrame
    scrs: pd.DataFrame  # SCRs on the video clock (onset_video_s ...), inside the session
    clock: ClockMap
    flags: list[str] = field(default_factory=list)


def _codes_columns(inputs: SessionInputs) -> dict:
    """Per video second: second, in_view, attended (NA where uncoded), coded, and the
    media state (:func:`~pipeline.metrics.states.classify_states`)."""
    n = inputs.duration_s
    codes = inputs.codes
    if codes["second"].duplicated().any():
        raise StageError("the media codes give some second of this session twice",
                         unit=inputs.key.label(), stage="align",
                         hint="each coder codes each second once in media_log.csv")
    # the row of `codes` for each second, -1 for none (codes outside the session are
    # left out)
    second = codes["second"].to_numpy(dtype=np.int64)
    inside = (second >= 0) & (second < n)
    row = np.full(n, -1, dtype=np.int64)
    row[second[inside]] = np.flatnonzero(inside)
    # A session has a few distinct code lists over thousands of seconds: the text work
    # and the states are done once per distinct value, then spread to the seconds.
    in_view, in_view_values = _per_second(codes["in_view"], row)
    attended, attended_values = _per_second(codes["attended"], row)
    columns = {
        "second": np.arange(n, dtype=np.int64),
        "in_view": in_view_values.take(in_view, allow_fill=True),
        "attended": attended_values.take(attended, allow_fill=True),
        "coded": in_view >= 0,
    }
    states = classify_states(pd.Series(in_view_values))
    for col in states.columns:
        columns[col] = states[col].array.take(in_view, allow_fill=True)
    return columns


def _per_second(column: pd.Series, row: np.ndarray
                ) -> tuple[np.ndarray, pd.api.extensions.ExtensionArray]:
    """For each second, the position of its value among the distinct values of
    ``column`` (-1 where ``row`` is -1 or the value is missing), and those distinct
    values as text (string dtype)."""
    value_of_row, distinct = pd.factorize(column)  # a missing value -> -1
    value = np.full(row.size, -1, dtype=np.int64)
    has = row >= 0
    value[has] = value_of_row[row[has]]
    return value, pd.Series(distinct).astype(TEXT).array


def _bin_means(second: np.ndarray, values: np.ndarray, use: np.ndarray, n: int
               ) -> np.ndarray:
    """Mean of the finite ``values[use]`` in each second 0 .. n - 1 (NaN where none)."""
    use = use & np.isfinite(values)
    in_second = second[use]
    sums = np.bincount(in_second, weights=values[use], minlength=n)[:n]
    counts = np.bincount(in_second, minlength=n)[:n]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / counts, np.nan)


#: Columns that count only in seconds whose skin conductance is valid.
_EDA_FEATURES = ("eda_us", "eda_tonic_us", "eda_phasic_us")

_SCR_VIDEO_COLUMNS = ["onset_video_s", "peak_video_s", "amplitude_us", "rise_time_s",
                      "half_recovery_s"]


def align_signals(key: SessionKey, duration_s: int, sync_pairs: np.ndarray,
                  signals: SessionSignals | None, cfg: SignalSettings) -> AlignedSignals:
    """Put one session's processed recording on the video clock, second by second.

    This half of the alignment needs no media codes, so it runs (and is cached) before
    the media log is read, and a changed media log does not invalidate it.

    Parameters
    ----------
    key : SessionKey
        The session (named in errors).
    duration_s : int
        The session's length in video seconds (one row per second 0 .. duration_s-1).
    sync_pairs : numpy.ndarray
        Shape (n, 2): video_s, sensor_s of the session's sync events.
    signals : SessionSignals or None
        The processed recording on the sensor clock; None when the session has none.
    cfg : SignalSettings
        Uses ``eda.min_valid_share``: a second is valid when at least that share of
        the samples expected in it (the sampling rate) is valid.
    """
    clock = fit_clock_map(sync_pairs)
    if clock.rate <= 0:
        raise StageError("the sync pairs give a sensor clock that runs backwards",
                         unit=key.label(), stage="align",
                         hint="check video_s and sensor_s of this session in sync.csv")
    n = duration_s
    columns: dict = {"sensor_s": clock.to_sensor(np.arange(n, dtype=float))}
    flags = list(clock.flags())
    if signals is None:
        for col in _MEANS:
            columns[col] = np.full(n, np.nan)
        columns["scr_onsets"] = np.zeros(n, dtype=np.int64)
        columns["scr_amplitude_sum_us"] = np.zeros(n)
        columns["signal_valid"] = np.zeros(n, dtype=bool)
        columns["hr_valid"] = np.zeros(n, dtype=bool)
        scrs_video = pd.DataFrame(columns=_SCR_VIDEO_COLUMNS)
        flags.append("no_recording")
    else:
        signal_columns, scrs_video, any_inside = _signal_columns(signals, clock, n, cfg)
        columns.update(signal_columns)
        if not any_inside:
            flags.append("recording_outside_session")
    return AlignedSignals(columns=pd.DataFrame(columns), scrs=scrs_video, clock=clock,
                          flags=flags)


def join_codes(inputs: SessionInputs, seconds: pd.DataFrame) -> pd.DataFrame:
    """The session's timeline: its IDs, its media codes and state per second, then the
    signal columns ``seconds`` (:attr:`AlignedSignals.columns`), in the order of
    :data:`~pipeline.types.TIMELINE_COLUMNS` (``arousal`` NaN until the metrics stage
    fills it)."""
    key = inputs.key
    every = np.zeros(inputs.duration_s, dtype=np.int64)
    columns: dict = {"participant_id": pd.array([key.participant_id], dtype=TEXT).take(every),
                     "session_id": pd.array([key.session_id], dtype=TEXT).take(every)}
    columns.update(_codes_columns(inputs))
    for col in seconds.columns:
        columns[col] = seconds[col].to_numpy()
    columns["arousal"] = np.nan
    # the declared order, whichever half made a column (then any a stage added)
    ordered = {col: columns.pop(col) for col in TIMELINE_COLUMNS if col in columns}
    ordered.update(columns)
    return pd.DataFrame(ordered)


def build_timeline(inputs: SessionInputs, signals: SessionSignals | None,
                   cfg: SignalSettings) -> AlignedSession:
    """Join one session's codes and processed signals, second by second
    (:func:`align_signals`, then :func:`join_codes`).

    Parameters
    ----------
    inputs : SessionInputs
        The session's codes (one coder), duration and sync pairs.
    signals : SessionSignals or None
        The processed recording on the sensor clock; None when the session has none.
    cfg : SignalSettings
        Passed to :func:`align_signals`.
    """
    aligned = align_signals(inputs.key, inputs.duration_s, inputs.sync_pairs, signals, cfg)
    return AlignedSession(timeline=join_codes(inputs, aligned.columns), scrs=aligned.scrs,
                          clock=aligned.clock, flags=aligned.flags)


def _signal_columns(signals: SessionSignals, clock: ClockMap, n: int, cfg: SignalSettings
                    ) -> tuple[dict[str, np.ndarray], pd.DataFrame, bool]:
    """The 1 Hz summary of the samples the clock map places in seconds 0 .. n - 1, the
    SCRs with their onset inside them (video clock), and whether any sample is."""
    s = signals.samples
    video = clock.to_video(s["time_s"].to_numpy(dtype=float))
    sec = np.floor(video).astype(np.int64)
    inside = (sec >= 0) & (sec < n)
    expected = signals.sampling_rate_hz if np.isfinite(signals.sampling_rate_hz) else 1.0
    if "eda_valid" in s.columns:
        good = np.bincount(sec[inside & s["eda_valid"].to_numpy(dtype=bool)],
                           minlength=n)[:n]
        signal_valid = (good / expected) >= cfg.eda.min_valid_share
    else:
        signal_valid = np.zeros(n, dtype=bool)
    columns = {}
    for col, valid_col in _MEANS.items():
        if col not in s.columns:
            columns[col] = np.full(n, np.nan)
            continue
        use = inside
        if valid_col and valid_col in s.columns:
            use = inside & s[valid_col].to_numpy(dtype=bool)
        means = _bin_means(sec, s[col].to_numpy(dtype=float), use, n)
        if col in _EDA_FEATURES:  # a second's EDA features count only where it is valid
            means[~signal_valid] = np.nan
        columns[col] = means
    columns["signal_valid"] = signal_valid
    # Heart rate is a slow series, often sampled once a second or once a beat beside
    # faster EDA: a second has valid HR when it holds a valid HR value.
    if "hr_valid" in s.columns and "hr_bpm" in s.columns:
        hr_ok = s["hr_valid"].to_numpy(dtype=bool) & np.isfinite(s["hr_bpm"].to_numpy(float))
        columns["hr_valid"] = np.bincount(sec[inside & hr_ok], minlength=n)[:n] > 0
    else:
        columns["hr_valid"] = np.zeros(n, dtype=bool)
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
    columns["scr_onsets"] = np.bincount(onset_sec, minlength=n)[:n]
    # float64 also when no SCR falls inside (bincount of no weights counts in int64)
    columns["scr_amplitude_sum_us"] = np.bincount(
        onset_sec, weights=scrs_video["amplitude_us"].to_numpy(), minlength=n)[:n] \
        .astype(np.float64, copy=False)
    return columns, scrs_video, bool(inside.any())
