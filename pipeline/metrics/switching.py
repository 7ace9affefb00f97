"""Attention bouts and switches between platforms (CONTRACT §2).

Both functions work on one session's per-second timeline (``pipeline.types``
``TIMELINE_COLUMNS``) and are vectorised: the timeline is run-length encoded once,
after which everything is arithmetic on the (few) runs.

They are shared by the metrics stage, the coder-agreement report and the power
simulation, so their signatures and output columns are part of the interface.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.config import DwellSettings, SwitchSettings
from pipeline.errors import StageError
from pipeline.types import shared_text

#: Columns of :func:`find_bouts`' result, in order.
BOUT_COLUMNS = ("platform", "start_s", "end_s", "duration_s", "censored", "censor_reason",
                "merged_from")

#: Columns of :func:`find_switches`' result, in order.
SWITCH_COLUMNS = ("from_platform", "to_platform", "from_end_s", "to_start_s", "gap_s", "second")

#: Censoring reasons in the order they are applied (the first that applies is reported).
CENSOR_REASONS = ("session_edge", "uncoded", "invalid_signal")

# Marks an uncoded second in the run-length key; cannot be a platform code because
# codes are validated to be printable.
_UNCODED = "\x00uncoded"


def _coded_mask(timeline: pd.DataFrame) -> np.ndarray:
    return timeline["coded"].fillna(False).to_numpy(dtype=bool)


def _check_seconds(timeline: pd.DataFrame) -> None:
    """The timeline must hold each second 0..n-1 once, in order (the align stage's promise)."""
    seconds = timeline["second"].to_numpy()
    if not np.array_equal(seconds, np.arange(len(timeline))):
        who = ""
        if len(timeline) and {"participant_id", "session_id"} <= set(timeline.columns):
            who = f"{timeline['participant_id'].iloc[0]}/{timeline['session_id'].iloc[0]}"
        raise StageError(
            "timeline seconds are not 0..n-1 in order", unit=who or None, stage="metrics",
            hint="build the timeline with pipeline.align (one row per video second)",
        )


def _runs(key: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Run-length encoding: (starts, exclusive ends, value) of each maximal run."""
    n = len(key)
    if n == 0:
        empty = np.array([], dtype=np.int64)
        return empty, empty, np.array([], dtype=object)
    change = np.empty(n, dtype=bool)
    change[0] = True
    change[1:] = key[1:] != key[:-1]
    starts = np.flatnonzero(change)
    ends = np.append(starts[1:], n)
    return starts.astype(np.int64), ends.astype(np.int64), key[starts]


def _uncoded_between(uncoded_cum: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Number of uncoded seconds in [lo, hi) for each pair, from a prefix sum (len n+1)."""
    return uncoded_cum[hi] - uncoded_cum[lo]


def _empty_bouts() -> pd.DataFrame:
    return pd.DataFrame({
        "platform": pd.Series([], dtype=object),
        "start_s": pd.Series([], dtype=np.int64),
        "end_s": pd.Series([], dtype=np.int64),
        "duration_s": pd.Series([], dtype=np.int64),
        "censored": pd.Series([], dtype=bool),
        "censor_reason": pd.Series([], dtype=object),
        "merged_from": pd.Series([], dtype=np.int64),
    })


def find_bouts(timeline: pd.DataFrame, cfg: SwitchSettings, dwell: DwellSettings) -> pd.DataFrame:
    """Attention bouts of one session, with short bouts dropped, merged and censored.

    A raw bout is a maximal run of consecutive coded seconds with the same non-empty
    ``attended`` platform. Then, in this order:

    1. **Drop**: raw bouts shorter than ``cfg.min_bout_s`` seconds are dropped; their
       seconds count as unattended from here on (as they do for switches).
    2. **Merge**: two consecutive kept bouts on the same platform merge when

       * every second between them is coded,
       * at least one dropped bout lies between them, and
       * the seconds between them (unattended seconds and seconds of dropped bouts
         alike) number at most ``cfg.max_gap_s``.

       The merged bout spans from the first bout's start to the second's end (the
       seconds between are part of its duration); chains merge the same way.
       Without a dropped bout between them two bouts stay apart, so with the default
       ``min_bout_s = 1`` nothing is dropped and nothing merges: bouts are exactly the
       maximal runs.
    3. **Censor**: a bout is right-censored (its duration is a lower bound on the
       dwell time) when the second just before its start or just after its end is
       outside the session (``session_edge``), uncoded (``uncoded``) or, when
       ``dwell.censor_at_invalid_signal``, has ``signal_valid`` False
       (``invalid_signal``). ``censor_reason`` is the first of these, in that order of
       priority, that applies to either side; '' for an observed bout.

    Parameters
    ----------
    timeline : DataFrame
        One session's per-second timeline: ``second`` (0..n-1 in order), ``coded``,
        ``attended`` ('' for none, NA where uncoded), ``signal_valid``.
    cfg : SwitchSettings
        ``min_bout_s`` and ``max_gap_s``.
    dwell : DwellSettings
        ``censor_at_invalid_signal``.

    Returns
    -------
    DataFrame
        One row per kept bout in time order: platform, start_s (first second), end_s
        (exclusive), duration_s, censored, censor_reason, merged_from (how many kept
        bouts it was merged from; 1 when not merged).
    """
    _check_seconds(timeline)
    n = len(timeline)
    if n == 0:
        return _empty_bouts()
    coded = _coded_mask(timeline)
    attended = timeline["attended"].astype(object).to_numpy()
    key = np.where(coded, attended, _UNCODED).astype(object)
    key[pd.isna(key)] = ""  # a coded second with a missing code has no attended platform
    starts, ends, values = _runs(key)
    is_bout = (values != "") & (values != _UNCODED)
    starts, ends, values = starts[is_bout], ends[is_bout], values[is_bout]
    long_enough = (ends - starts) >= cfg.min_bout_s
    dropped_starts = starts[~long_enough]
    starts, ends, values = starts[long_enough], ends[long_enough], values[long_enough]
    if len(starts) == 0:
        return _empty_bouts()

    uncoded_cum = np.concatenate([[0], np.cumsum(~coded)])
    # Pair i: kept bout i and kept bout i + 1.
    gap_lo, gap_hi = ends[:-1], starts[1:]
    dropped_between = (np.searchsorted(dropped_starts, gap_hi, side="left")
                       - np.searchsorted(dropped_starts, gap_lo, side="left"))
    merge_with_next = (
        (values[:-1] == values[1:])
        & (_uncoded_between(uncoded_cum, gap_lo, gap_hi) == 0)
        & (dropped_between > 0)
        & ((gap_hi - gap_lo) <= cfg.max_gap_s)
    )
    group = np.concatenate([[0], np.cumsum(~merge_with_next)])
    first = np.flatnonzero(np.concatenate([[True], ~merge_with_next]))
    last = np.append(first[1:] - 1, len(starts) - 1)
    b_start, b_end, b_platform = starts[first], ends[last], values[first]
    merged_from = np.bincount(group).astype(np.int64)

    valid = timeline["signal_valid"].fillna(False).to_numpy(dtype=bool)
    before = b_start - 1
    has_before = before >= 0
    has_after = b_end < n
    before_i = np.clip(before, 0, n - 1)
    after_i = np.clip(b_end, 0, n - 1)
    edge = ~has_before | ~has_after
    uncoded_side = (has_before & ~coded[before_i]) | (has_after & ~coded[after_i])
    if dwell.censor_at_invalid_signal:
        invalid_side = (has_before & ~valid[before_i]) | (has_after & ~valid[after_i])
    else:
        invalid_side = np.zeros(len(b_start), dtype=bool)
    reason = np.select([edge, uncoded_side, invalid_side], list(CENSOR_REASONS), "")

    return pd.DataFrame({
        "platform": shared_text(b_platform),
        "start_s": b_start.astype(np.int64),
        "end_s": b_end.astype(np.int64),
        "duration_s": (b_end - b_start).astype(np.int64),
        "censored": reason != "",
        "censor_reason": shared_text(reason),
        "merged_from": merged_from,
    })


def find_switches(bouts: pd.DataFrame, timeline: pd.DataFrame, cfg: SwitchSettings) -> pd.DataFrame:
    """Switches between platforms: consecutive kept bouts on different platforms.

    A switch is a kept bout on platform X followed by the next kept bout, on a
    platform Y != X, with at most ``cfg.max_gap_s`` seconds between them, every one
    of them coded. Seconds of dropped (too short) bouts between them count as
    unattended seconds of the gap; a single uncoded second between them breaks the
    switch, because what happened there is unknown.

    Parameters
    ----------
    bouts : DataFrame
        The result of :func:`find_bouts` for the same timeline.
    timeline : DataFrame
        The session's per-second timeline (``second``, ``coded``).
    cfg : SwitchSettings
        ``max_gap_s``.

    Returns
    -------
    DataFrame
        One row per switch in time order: from_platform, to_platform, from_end_s (end,
        exclusive, of the bout left), to_start_s (first second of the bout entered),
        gap_s (seconds between them), second (= to_start_s, the moment of the switch).
    """
    _check_seconds(timeline)
    b = bouts.sort_values("start_s", kind="stable")
    platform = b["platform"].to_numpy(dtype=object)
    start = b["start_s"].to_numpy(dtype=np.int64)
    end = b["end_s"].to_numpy(dtype=np.int64)
    if len(b) < 2:
        return pd.DataFrame({
            "from_platform": pd.Series([], dtype=object),
            "to_platform": pd.Series([], dtype=object),
            "from_end_s": pd.Series([], dtype=np.int64),
            "to_start_s": pd.Series([], dtype=np.int64),
            "gap_s": pd.Series([], dtype=np.int64),
            "second": pd.Series([], dtype=np.int64),
        })
    coded = _coded_mask(timeline)
    uncoded_cum = np.concatenate([[0], np.cumsum(~coded)])
    gap_lo, gap_hi = end[:-1], start[1:]
    gap = gap_hi - gap_lo
    is_switch = (
        (platform[:-1] != platform[1:])
        & (gap <= cfg.max_gap_s)
        & (_uncoded_between(uncoded_cum, gap_lo, gap_hi) == 0)
    )
    return pd.DataFrame({
        "from_platform": platform[:-1][is_switch],
        "to_platform": platform[1:][is_switch],
        "from_end_s": gap_lo[is_switch],
        "to_start_s": gap_hi[is_switch],
        "gap_s": gap[is_switch],
        "second": gap_hi[is_switch],
    })
