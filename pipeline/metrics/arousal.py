"""Arousal (CONTRACT §2): within-participant z-scores and their summary per media state.

The runner computes arousal in two passes, because the z-score pools all of one
participant's sessions::

    mean, sd, n = zscore_stats(timelines_of_participant, cfg)
    timelines = [add_arousal(tl, mean, sd, cfg, n=n) for tl in timelines_of_participant]

(:func:`standardise_participant` does both). Then, per session, :func:`state_arousal`
summarises arousal, skin conductance responses and heart rate per coarse state and
:func:`compression_ratio` compares the arousal range of multi with single time.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pandas as pd

from pipeline.config import ArousalSettings
from pipeline.errors import choose, StageError
from pipeline.types import STATES

#: Flag added where arousal cannot be standardised (fewer than two valid seconds, or
#: a skin conductance that never varies).
FLAG_NOT_STANDARDISED = "arousal_not_standardised"

#: Percentiles of the arousal distribution reported as trough and peak (CONTRACT §2).
TROUGH_PERCENTILE = 5.0
PEAK_PERCENTILE = 95.0


def _source_eda(timeline: pd.DataFrame) -> pd.Series:
    """Cleaned skin conductance, 1 Hz mean (µS)."""
    return timeline["eda_us"]


def _source_phasic(timeline: pd.DataFrame) -> pd.Series:
    """Phasic component of skin conductance, 1 Hz mean (µS)."""
    return timeline["eda_phasic_us"]


#: Signals the arousal z-score can be built from, chosen by ``[arousal] source``.
AROUSAL_SOURCES: dict[str, Callable[[pd.DataFrame], pd.Series]] = {
    "eda": _source_eda,
    "phasic": _source_phasic,
}


def arousal_source(timeline: pd.DataFrame, cfg: ArousalSettings) -> pd.Series:
    """The per-second signal arousal is built from (``eda_us`` or ``eda_phasic_us``)."""
    fn = choose(AROUSAL_SOURCES, cfg.source, "[arousal] source")
    return fn(timeline).astype(float)


def _valid(timeline: pd.DataFrame) -> np.ndarray:
    return timeline["signal_valid"].fillna(False).to_numpy(dtype=bool)


def _valid_values(timeline: pd.DataFrame, cfg: ArousalSettings) -> np.ndarray:
    values = arousal_source(timeline, cfg).to_numpy(dtype=float)
    keep = _valid(timeline) & np.isfinite(values)
    return values[keep]


def zscore_stats(timelines: list[pd.DataFrame], cfg: ArousalSettings) -> tuple[float, float, int]:
    """Mean, SD (ddof = 1) and count of the arousal source over valid seconds.

    Pools every second with valid signal (``signal_valid`` True and a finite value) of
    the given timelines, coded or not: pass all sessions of one participant.

    Returns
    -------
    tuple of (float, float, int)
        mean, sd (NaN with fewer than two seconds), n.
    """
    parts = [_valid_values(tl, cfg) for tl in timelines]
    values = np.concatenate(parts) if parts else np.array([], dtype=float)
    n = int(values.size)
    mean = float(values.mean()) if n else float("nan")
    sd = float(values.std(ddof=1)) if n >= 2 else float("nan")
    return mean, sd, n


def add_arousal(timeline: pd.DataFrame, mean: float, sd: float, cfg: ArousalSettings,
                *, n: int | None = None) -> pd.DataFrame:
    """Add the ``arousal`` column: (source - mean) / sd where the signal is valid.

    Where ``sd`` is 0 or not finite, or ``n`` (if given) is below 2, arousal cannot be
    standardised: the column is all NaN and ``FLAG_NOT_STANDARDISED`` is put in the
    result's ``attrs["flags"]``. Seconds with invalid signal are NaN in any case.

    Returns
    -------
    DataFrame
        A copy of ``timeline`` with ``arousal`` set. The copy is shallow: its other
        columns share the input's data (a deep copy of an hours-long timeline cost more
        than the z-score itself); the input is not changed, as long as neither frame
        is written to in place.
    """
    out = timeline.copy(deep=False)
    flags = list(timeline.attrs.get("flags", []))
    usable = np.isfinite(mean) and np.isfinite(sd) and sd > 0 and (n is None or n >= 2)
    if usable:
        z = (arousal_source(timeline, cfg).to_numpy(dtype=float) - mean) / sd
        z[~_valid(timeline)] = np.nan
    else:
        z = np.full(len(out), np.nan)
        if FLAG_NOT_STANDARDISED not in flags:
            flags.append(FLAG_NOT_STANDARDISED)
    out["arousal"] = z  # a new column array: the input's arousal, if any, is untouched
    out.attrs = {**out.attrs, "flags": flags}  # a new dict: the input's attrs stay as they were
    return out


def standardise_participant(timelines: list[pd.DataFrame],
                            cfg: ArousalSettings) -> list[pd.DataFrame]:
    """Arousal for all sessions of one participant (z-scored over them together)."""
    mean, sd, n = zscore_stats(timelines, cfg)
    return [add_arousal(tl, mean, sd, cfg, n=n) for tl in timelines]


def state_arousal(timeline: pd.DataFrame, cfg: ArousalSettings) -> pd.DataFrame:
    """Arousal, skin conductance responses and heart rate per coarse media state.

    For each state (none, single, multi; all three always present) over the coded
    seconds of that state:

    * ``seconds``: coded seconds; ``valid_seconds``: those with valid signal.
    * ``enough_valid_time``: valid_seconds >= ``cfg.min_state_minutes`` * 60.
    * ``arousal_mean``, ``arousal_p05`` (trough), ``arousal_p95`` (peak),
      ``arousal_range`` (= p95 - p05) over the finite arousal of the valid seconds;
      only where ``enough_valid_time``, else NaN. Percentiles are numpy's
      ``np.percentile`` default (linear interpolation between order statistics,
      Hyndman & Fan's definition 7).
    * ``scr_per_min``: SCR onsets in valid seconds / valid minutes (NaN without valid
      seconds); ``scr_amplitude_mean_us``: summed SCR amplitude / SCR onsets there (NaN
      without onsets).
    * ``hr_valid_seconds`` and ``hr_mean_bpm``: mean heart rate over the seconds with
      valid heart rate.

    Parameters
    ----------
    timeline : DataFrame
        One session's timeline with the ``arousal`` column (see :func:`add_arousal`).
    cfg : ArousalSettings
        ``min_state_minutes``.

    Returns
    -------
    DataFrame
        One row per state in the order none, single, multi.

    References
    ----------
    Hyndman, R. J., & Fan, Y. (1996). Sample quantiles in statistical packages. The
    American Statistician, 50, 361–365.
    """
    if "arousal" not in timeline.columns:
        raise StageError("timeline has no 'arousal' column", stage="metrics",
                         hint="run metrics.arousal.add_arousal on the participant's sessions first")
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    state = timeline["state"].to_numpy(dtype=object, na_value="")
    valid = _valid(timeline)
    hr_valid = timeline["hr_valid"].fillna(False).to_numpy(dtype=bool)
    arousal = timeline["arousal"].to_numpy(dtype=float)
    onsets = timeline["scr_onsets"].fillna(0).to_numpy(dtype=float)
    amplitude = timeline["scr_amplitude_sum_us"].fillna(0).to_numpy(dtype=float)
    hr = timeline["hr_bpm"].to_numpy(dtype=float)
    # a hair of slack so that e.g. min_state_minutes = 11/60 accepts 11 seconds
    min_valid_s = cfg.min_state_minutes * 60.0 - 1e-9
    rows = []
    for name in STATES:  # three iterations; the work inside is vectorised
        in_state = coded & (state == name)
        v = in_state & valid
        n_valid = int(v.sum())
        enough = n_valid >= min_valid_s
        a = arousal[v]
        a = a[np.isfinite(a)]
        if enough and a.size:
            mean = float(a.mean())
            p05, p95 = (float(x) for x in np.percentile(a, [TROUGH_PERCENTILE, PEAK_PERCENTILE]))
        else:
            mean = p05 = p95 = float("nan")
        n_onsets = float(onsets[v].sum())
        h = hr[in_state & hr_valid]
        h = h[np.isfinite(h)]
        rows.append({
            "state": name,
            "seconds": int(in_state.sum()),
            "valid_seconds": n_valid,
            "enough_valid_time": bool(enough),
            "arousal_mean": mean,
            "arousal_p05": p05,
            "arousal_p95": p95,
            "arousal_range": p95 - p05,
            "scr_per_min": n_onsets / (n_valid / 60.0) if n_valid else float("nan"),
            "scr_amplitude_mean_us": (float(amplitude[v].sum()) / n_onsets if n_onsets
                                      else float("nan")),
            "hr_valid_seconds": int(h.size),
            "hr_mean_bpm": float(h.mean()) if h.size else float("nan"),
        })
    return pd.DataFrame(rows)


def compression_ratio(states: pd.DataFrame) -> float:
    """Arousal range in multi time over the range in single time.

    NaN where either range is missing (not enough valid time) or the single range is
    0. Below 1 the multi-platform arousal distribution is narrower ("compressed").
    """
    ranges = states.set_index("state")["arousal_range"]
    multi = float(ranges.get("multi", np.nan))
    single = float(ranges.get("single", np.nan))
    if not (np.isfinite(multi) and np.isfinite(single)) or single == 0:
        return float("nan")
    return multi / single
