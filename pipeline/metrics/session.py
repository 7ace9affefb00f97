"""One session's metrics (CONTRACT §2 and §3): the rows of the metrics/ tables.

:func:`session_metrics` is a pure function of the session's timeline (with
``arousal`` already added, see :mod:`pipeline.metrics.arousal`), its
:class:`~pipeline.types.SessionInputs` and the configuration; it hands each inner
function only the config section that function uses.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.config import Config
from pipeline.errors import StageError
from pipeline.metrics.arousal import FLAG_NOT_STANDARDISED, compression_ratio, state_arousal
from pipeline.metrics.budget import time_budget
from pipeline.metrics.dwell import km_median
from pipeline.metrics.switching import find_bouts, find_switches
from pipeline.types import TIMELINE_COLUMNS, SessionInputs, SessionMetrics, constant_text

#: The session has less multi-platform time than ``[switching] min_multi_minutes``:
#: its switch rate is left empty (and out of the models).
FLAG_MULTI_TIME_BELOW_MINIMUM = "multi_time_below_minimum"
#: The media log codes none of the session's seconds.
FLAG_NO_CODED_SECONDS = "no_coded_seconds"

#: Columns put first in every per-session table.
KEY_COLUMNS = ("participant_id", "session_id", "cohort")

_REQUIRED = ("second", "coded", "in_view", "attended", "n_in_view", "state", "eda_us",
             "eda_phasic_us", "scr_onsets", "scr_amplitude_sum_us", "hr_bpm", "signal_valid",
             "hr_valid", "arousal")


def _keyed(table: pd.DataFrame, inputs: SessionInputs) -> pd.DataFrame:
    """``table`` with the KEY_COLUMNS put in front (a new frame with a fresh index)."""
    values = (inputs.key.participant_id, inputs.key.session_id, inputs.cohort)
    keys = pd.DataFrame({col: constant_text(value, len(table))
                         for col, value in zip(KEY_COLUMNS, values)})
    return pd.concat([keys, table.reset_index(drop=True)], axis=1)


def _check_columns(timeline: pd.DataFrame, inputs: SessionInputs) -> None:
    missing = [c for c in _REQUIRED if c not in timeline.columns]
    if missing:
        raise StageError(
            f"timeline lacks column(s) {', '.join(missing)}", unit=inputs.key.label(),
            stage="metrics",
            hint="the timeline comes from pipeline.align with arousal added "
                 f"(columns: {', '.join(TIMELINE_COLUMNS)})",
        )
    if len(timeline) != inputs.duration_s:
        raise StageError(
            f"timeline has {len(timeline)} rows for a session of {inputs.duration_s} s",
            unit=inputs.key.label(), stage="metrics",
            hint="the timeline needs one row per video second 0..duration_s-1",
        )


def _per_hour(count: int, seconds: int) -> float:
    return count / (seconds / 3600.0)


def session_metrics(timeline: pd.DataFrame, inputs: SessionInputs, cfg: Config) -> SessionMetrics:
    """All metric rows of one session.

    Session row (one row of metrics/sessions.csv): participant_id, session_id, cohort,
    coder, duration_s, coded_seconds, coded_hours, coded_fraction, media_seconds and
    media_hours (coded seconds with at least one platform in view), multi_seconds,
    multi_hours, switches, switches_per_hour (= switches / multi_hours; NaN with the
    flag ``multi_time_below_minimum`` where multi time is under
    ``[switching] min_multi_minutes`` or zero), enough_multi_time, eda_valid_fraction
    (share of coded seconds with valid skin conductance), hr_valid_fraction,
    compression_ratio, bouts, censored_bouts, dwell_median_s (Kaplan–Meier median of
    all bouts), flags (';'-joined).

    Tables (each starting participant_id, session_id, cohort): ``states`` (see
    :func:`~pipeline.metrics.arousal.state_arousal`), ``platforms`` and ``groups``
    (see :mod:`pipeline.metrics.budget`), ``bouts`` (see
    :func:`~pipeline.metrics.switching.find_bouts`, plus the platform's group) and
    ``switches`` (see :func:`~pipeline.metrics.switching.find_switches`).
    """
    _check_columns(timeline, inputs)
    flags: list[str] = []
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    n_in_view = timeline["n_in_view"].astype("Float64").fillna(0).to_numpy(dtype=float)
    state = timeline["state"].to_numpy(dtype=object, na_value="")
    valid = timeline["signal_valid"].fillna(False).to_numpy(dtype=bool)
    hr_valid = timeline["hr_valid"].fillna(False).to_numpy(dtype=bool)

    coded_s = int(coded.sum())
    media_s = int((coded & (n_in_view >= 1)).sum())
    multi_s = int((coded & (state == "multi")).sum())
    if coded_s == 0:
        flags.append(FLAG_NO_CODED_SECONDS)

    dwell_cfg = cfg.dwell
    if inputs.recording_path is None:
        # No recording at all is not "invalid signal": a coding-only session's bouts
        # are censored only at session edges and uncoded gaps.
        dwell_cfg = dwell_cfg.model_copy(update={"censor_at_invalid_signal": False})
    bouts = find_bouts(timeline, cfg.switching, dwell_cfg)
    switches = find_switches(bouts, timeline, cfg.switching)
    enough_multi = multi_s > 0 and multi_s / 60.0 >= cfg.switching.min_multi_minutes
    if enough_multi:
        rate = _per_hour(len(switches), multi_s)
    else:
        rate = float("nan")
        flags.append(FLAG_MULTI_TIME_BELOW_MINIMUM)

    states = state_arousal(timeline, cfg.arousal)
    arousal = timeline["arousal"].to_numpy(dtype=float)
    valid_coded = coded & valid
    if (FLAG_NOT_STANDARDISED in timeline.attrs.get("flags", [])
            or (valid_coded.any() and not np.isfinite(arousal[valid_coded]).any())):
        flags.append(FLAG_NOT_STANDARDISED)

    groups_map = inputs.platform_groups
    platforms, groups = time_budget(timeline, bouts, groups_map)
    bouts_out = bouts.copy()
    bouts_out.insert(1, "group", [groups_map.get(p, "ungrouped") for p in bouts["platform"]])

    session = {
        "participant_id": inputs.key.participant_id,
        "session_id": inputs.key.session_id,
        "cohort": inputs.cohort,
        "coder": inputs.coder,
        "duration_s": int(inputs.duration_s),
        "coded_seconds": coded_s,
        "coded_hours": coded_s / 3600.0,
        "coded_fraction": coded_s / inputs.duration_s if inputs.duration_s else float("nan"),
        "media_seconds": media_s,
        "media_hours": media_s / 3600.0,
        "multi_seconds": multi_s,
        "multi_hours": multi_s / 3600.0,
        "switches": int(len(switches)),
        "switches_per_hour": rate,
        "enough_multi_time": bool(enough_multi),
        "eda_valid_fraction": float(valid_coded.sum()) / coded_s if coded_s else float("nan"),
        "hr_valid_fraction": float((coded & hr_valid).sum()) / coded_s if coded_s else float("nan"),
        "compression_ratio": compression_ratio(states),
        "bouts": int(len(bouts)),
        "censored_bouts": int(bouts["censored"].sum()),
        "dwell_median_s": km_median(bouts["duration_s"].to_numpy(float),
                                    ~bouts["censored"].to_numpy(bool)),
        "flags": ";".join(flags),
    }
    return SessionMetrics(
        session=session,
        states=_keyed(states, inputs),
        platforms=_keyed(platforms, inputs),
        groups=_keyed(groups, inputs),
        bouts=_keyed(bouts_out, inputs),
        switches=_keyed(switches, inputs),
        flags=flags,
    )
