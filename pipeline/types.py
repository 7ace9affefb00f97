"""The typed objects passed between stages.

The data flow is one way::

    ingest.load_study(target)            -> Study
    ingest.read_recording(path, cfg)     -> Recording          (runner does the I/O)
    signals.process_recording(rec, cfg)  -> SessionSignals     (sensor clock)
    align.align_signals(key, duration, sync, sig, cfg) -> per-second signal columns
    align.join_codes(inputs, columns)    -> per-second timeline DataFrame (video clock)
    metrics.arousal.add_arousal(timelines of one participant) -> same, with `arousal`
    metrics.session_metrics(timeline, inputs, cfg) -> SessionMetrics
    models.compare(tables, cfg)          -> comparisons DataFrame
    report.build(out_dir)                -> charts, report.html, deck.pptx

Per-session stages are pure functions of (these objects, one config section).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

#: Columns of the per-second timeline (one row per video second of a session).
#: Written to OUT/timeline/ as Parquet. Stages may add columns, never rename these.
TIMELINE_COLUMNS: dict[str, str] = {
    "participant_id": "participant ID",
    "session_id": "session ID",
    "second": "video-clock second from the session start, 0-based",
    "coded": "True where the media log codes this second",
    "in_view": "platform codes in view, sorted, ';'-joined ('' for none; NA where uncoded)",
    "attended": "the attended platform ('' for none; NA where uncoded)",
    "n_in_view": "number of platforms in view (NA where uncoded)",
    "state": "coarse state: none / single / multi (NA where uncoded)",
    "fine_state": "sorted in-view codes joined by '+' ('none' for none; NA where uncoded)",
    "sensor_s": "sensor-clock time of this second's start after the sync mapping",
    "eda_us": "1 Hz mean of cleaned skin conductance (µS)",
    "eda_tonic_us": "1 Hz mean of the tonic component (µS)",
    "eda_phasic_us": "1 Hz mean of the phasic component (µS)",
    "scr_onsets": "number of SCR onsets in this second",
    "scr_amplitude_sum_us": "sum of the amplitudes of SCRs with onset in this second (µS)",
    "hr_bpm": "1 Hz mean heart rate (beats/min)",
    "motion_g": "1 Hz mean accelerometer magnitude deviation from 1 g (g)",
    "signal_valid": "True where this second's skin conductance is valid",
    "hr_valid": "True where this second's heart rate is valid",
    "arousal": "within-participant z-score of the arousal source (NaN where invalid)",
}

STATES = ("none", "single", "multi")

#: The dtype of the timeline's text columns (codes, states, IDs): pandas' string dtype
#: held in Arrow. A timeline's few distinct texts repeat over thousands of seconds;
#: held in Arrow they are taken, compared, factorised and written to Parquet without a
#: Python object per second (measured on a 4-hour session of the reference study of
#: benchmarks/scaling.py: its timeline converts to Arrow in 6 ms instead of 15 ms).
TEXT = pd.StringDtype("pyarrow")


def shared_text(values: np.ndarray) -> np.ndarray:
    """``values`` as an object array in which rows of equal text share one ``str``.

    The metric tables' text columns (IDs, platforms, reasons) repeat a few values over
    hundreds of rows per session. Made by numpy's casts they hold one string object
    per row; shared, they take a tenth of the memory in the runner, which keeps every
    session's rows for the study tables, and in the pickles that carry them from the
    workers (pickle writes an object once however often it recurs).
    """
    codes, uniques = pd.factorize(np.asarray(values, dtype=object), use_na_sentinel=False)
    return np.asarray(uniques, dtype=object)[codes]


def constant_text(value: str, n: int) -> np.ndarray:
    """An object array of ``n`` rows sharing the one string ``value`` (numpy's
    ``np.full(n, value, dtype=object)`` makes a string per row)."""
    out = np.empty(n, dtype=object)
    out.fill(value)
    return out


@dataclass(frozen=True)
class SessionKey:
    participant_id: str
    session_id: str

    def label(self) -> str:
        return f"{self.participant_id}/{self.session_id}"

    def stem(self) -> str:
        """File-name stem used for per-session files (IDs are validated safe)."""
        return f"{self.participant_id}__{self.session_id}"


def session_keys(sessions: pd.DataFrame) -> list[SessionKey]:
    """The key of each row of a sessions table, in its order."""
    return [SessionKey(p, s) for p, s in
            sessions[["participant_id", "session_id"]].itertuples(index=False)]


@dataclass
class Study:
    """A validated study folder. Everything here has passed ingest's checks.

    Tables use the contract's column names.

    * ``roster``: participant_id, cohort, covariate columns...
    * ``sessions``: participant_id, session_id, start, end (tz-aware UTC Timestamps),
      duration_s (int)
    * ``media_log``: participant_id, session_id, second (int32), in_view (sorted codes
      ';'-joined, '' for none), attended ('' for none), coder ('' if the log has no
      coder column). All coders' rows are kept here, sorted by participant, session,
      coder and second. The text columns are pandas categoricals of those strings
      (a log holds millions of seconds but few distinct values); group them with
      ``observed=True`` and convert a slice with ``.astype(object)`` for plain strings.
    * ``sync``: participant_id, session_id, video_s, sensor_s (float)
    * ``survey``: participant_id, item, value, or None
    * ``recordings``: SessionKey -> path of that session's signal file
    * ``platform_groups``: platform code -> group (from [platforms], or each code seen
      mapped to "ungrouped" when [platforms] is absent)
    """

    root: Path
    roster: pd.DataFrame
    sessions: pd.DataFrame
    media_log: pd.DataFrame
    sync: pd.DataFrame
    survey: pd.DataFrame | None
    recordings: dict[SessionKey, Path]
    platform_groups: dict[str, str]
    vocabulary_declared: bool
    input_files: list[Path] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    def session_keys(self) -> list[SessionKey]:
        return session_keys(self.sessions)

    def coders(self, key: SessionKey) -> list[str]:
        """The coders of one session, sorted ('' for a log without coder column)."""
        m = self.media_log
        rows = (m["participant_id"] == key.participant_id) & (m["session_id"] == key.session_id)
        return sorted(str(c) for c in m.loc[rows, "coder"].unique())


@dataclass
class RecordingInputs:
    """What one session's signal work needs: no media codes, so the runner builds it
    (and starts that work) before the media log is read."""

    key: SessionKey
    duration_s: int
    sync_pairs: np.ndarray  # shape (n, 2): video_s, sensor_s
    recording_path: Path | None


@dataclass
class SessionInputs:
    """Everything one session's stages need, cut out of the study by the runner."""

    key: SessionKey
    cohort: str
    duration_s: int
    codes: pd.DataFrame  # second, in_view, attended: one coder's rows, sorted by second
    coder: str
    sync_pairs: np.ndarray  # shape (n, 2): video_s, sensor_s
    recording_path: Path | None
    platform_groups: dict[str, str]


@dataclass
class Recording:
    """One session's sensor recording on its own clock, as read from disk.

    ``channels`` maps contract names (eda_us, hr_bpm, acc_x, acc_y, acc_z, resp, ibi_ms)
    to float arrays the same length as ``time_s``; NaN where a channel has no sample.
    """

    time_s: np.ndarray
    channels: dict[str, np.ndarray]
    source: Path | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def sampling_rate_hz(self) -> float:
        """Median sampling rate of the time axis (NaN with fewer than two samples)."""
        if len(self.time_s) < 2:
            return float("nan")
        return float(1.0 / np.median(np.diff(self.time_s)))

    @property
    def nbytes(self) -> int:
        return int(self.time_s.nbytes + sum(a.nbytes for a in self.channels.values()))


@dataclass
class SessionSignals:
    """A processed recording, still on the sensor clock.

    ``samples`` has one row per sample of the processed grid (the signals stage
    resamples to a uniform grid and decimates to its kept rate, 8 Hz by default; see
    ``sampling_rate_hz``): time_s, eda_us (cleaned),
    eda_tonic_us, eda_phasic_us, eda_valid (bool), and where present hr_bpm, hr_valid,
    motion_g. ``scrs`` has one row per SCR: onset_s, peak_s, amplitude_us, rise_time_s,
    half_recovery_s (NaN when not reached). ``invalid_share`` maps each artifact rule
    to the share of samples it marked invalid. ``methods`` names the published methods
    that ran (keys of the registries), for the report's methods text.
    """

    samples: pd.DataFrame
    scrs: pd.DataFrame
    invalid_share: dict[str, float]
    methods: dict[str, str]
    sampling_rate_hz: float
    notes: list[str] = field(default_factory=list)


@dataclass
class SessionMetrics:
    """One session's metric rows, ready to be concatenated into the study tables."""

    session: dict  # one row of metrics/sessions.csv
    states: pd.DataFrame  # rows of metrics/states.csv
    platforms: pd.DataFrame  # rows of metrics/platforms.csv
    groups: pd.DataFrame  # rows of metrics/groups.csv (time budget per platform group)
    bouts: pd.DataFrame  # rows of metrics/bouts.csv (every attention bout, with censoring)
    switches: pd.DataFrame  # rows of metrics/switches.csv (every switch event)
    flags: list[str] = field(default_factory=list)
