"""Time budget per platform and per platform group of one session.

Only coded seconds count. A platform's ``in_view_seconds`` are the coded seconds it was
in view, its ``attended_seconds`` those it was the attended platform. A second counts
for a group when any of the group's platforms is in view (once, however many are) or
when the attended platform belongs to the group. Bouts and dwell medians come from the
attention bouts of :func:`pipeline.metrics.switching.find_bouts`.

A session has hours of seconds but only a handful of distinct in-view combinations and
attended platforms, so the seconds are counted once per distinct value
(:func:`_seen_codes`) and everything after that is arithmetic on those few counts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.metrics.dwell import km_median

#: Group of a platform code seen in the log but missing from the vocabulary.
UNGROUPED = "ungrouped"


@dataclass(frozen=True)
class _SeenCodes:
    """What the coded seconds of one session show, counted per distinct value."""

    platforms: list[str]          # every platform: vocabulary, in view, attended, bouts; sorted
    in_view: np.ndarray           # distinct in-view combinations x platforms, True = in view
    combo_seconds: np.ndarray     # coded seconds of each distinct combination
    attended_seconds: np.ndarray  # coded seconds each platform was attended, by platform


def _distinct_counts(values: pd.Series, coded: np.ndarray) -> dict[str, int]:
    """Coded seconds per distinct value (as text) of ``values``; NA left out."""
    codes, uniques = pd.factorize(values)  # NA -> -1
    counts = np.bincount(codes[coded & (codes >= 0)], minlength=len(uniques))
    out: dict[str, int] = {}
    for value, n in zip(np.asarray(uniques, dtype=object), counts):
        if n:  # a value only uncoded seconds have does not count
            out[str(value)] = out.get(str(value), 0) + int(n)
    return out


def _seen_codes(timeline: pd.DataFrame, bouts: pd.DataFrame,
                platform_groups: dict[str, str]) -> _SeenCodes:
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    combos = _distinct_counts(timeline["in_view"], coded)
    split = [[c for c in combo.split(";") if c] for combo in combos]
    attended = _distinct_counts(timeline["attended"], coded)
    attended.pop("", None)  # '' is a coded second with nothing attended
    seen = set(platform_groups).union(*split, attended)
    seen.update(bouts["platform"].astype(str).unique())
    platforms = sorted(seen)
    column = {p: j for j, p in enumerate(platforms)}
    in_view = np.zeros((len(split), len(platforms)), dtype=bool)
    for u, codes in enumerate(split):
        in_view[u, [column[c] for c in codes]] = True
    return _SeenCodes(
        platforms=platforms,
        in_view=in_view,
        combo_seconds=np.fromiter(combos.values(), dtype=np.int64, count=len(combos)),
        attended_seconds=np.array([attended.get(p, 0) for p in platforms], dtype=np.int64),
    )


def _bout_summary(bouts: pd.DataFrame, key: pd.Series, index: list[str]
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """bouts, censored_bouts and KM dwell median per value of ``index``.

    ``key`` gives each bout's platform (or group), aligned to ``bouts``; a value of
    ``index`` without bouts gets 0, 0 and NaN.
    """
    observed = ~bouts["censored"].to_numpy(dtype=bool)
    durations = bouts["duration_s"].to_numpy(dtype=float)
    keys = key.to_numpy(dtype=object)
    n_bouts = np.zeros(len(index), dtype=np.int64)
    n_censored = np.zeros(len(index), dtype=np.int64)
    median = np.full(len(index), np.nan)
    for i, k in enumerate(index):  # one iteration per platform (or group), not per second
        sel = keys == k
        if sel.any():
            n_bouts[i] = sel.sum()
            n_censored[i] = (~observed[sel]).sum()
            median[i] = km_median(durations[sel], observed[sel])
    return n_bouts, n_censored, median


def _platform_table(seen: _SeenCodes, bouts: pd.DataFrame,
                    platform_groups: dict[str, str]) -> pd.DataFrame:
    platforms = seen.platforms
    n_bouts, n_censored, median = _bout_summary(bouts, bouts["platform"].astype(str),
                                                platforms)
    return pd.DataFrame({
        "platform": platforms,
        "group": [platform_groups.get(p, UNGROUPED) for p in platforms],
        "in_view_seconds": seen.combo_seconds @ seen.in_view.astype(np.int64),
        "attended_seconds": seen.attended_seconds,
        "bouts": n_bouts,
        "censored_bouts": n_censored,
        "dwell_median_s": median,
    })


def _group_table(seen: _SeenCodes, bouts: pd.DataFrame,
                 platform_groups: dict[str, str]) -> pd.DataFrame:
    group_of = [platform_groups.get(p, UNGROUPED) for p in seen.platforms]
    groups = sorted(set(group_of))
    member = np.array([[g == name for name in groups] for g in group_of],
                      dtype=np.int64).reshape(len(group_of), len(groups))
    # a combination shows a group when it shows any of the group's platforms, so a
    # second with two screens of one group counts once for it
    group_in_view = (seen.in_view.astype(np.int64) @ member) > 0
    by_platform = dict(zip(seen.platforms, group_of))
    n_bouts, n_censored, median = _bout_summary(
        bouts, bouts["platform"].astype(str).map(by_platform), groups)
    return pd.DataFrame({
        "group": groups,
        "platforms": member.sum(axis=0),
        "in_view_seconds": seen.combo_seconds @ group_in_view.astype(np.int64),
        "attended_seconds": seen.attended_seconds @ member,
        "bouts": n_bouts,
        "censored_bouts": n_censored,
        "dwell_median_s": median,
    })


def platform_budget(timeline: pd.DataFrame, bouts: pd.DataFrame,
                    platform_groups: dict[str, str]) -> pd.DataFrame:
    """Time budget and dwell time per platform.

    Parameters
    ----------
    timeline : DataFrame
        One session's per-second timeline (``coded``, ``in_view``, ``attended``).
    bouts : DataFrame
        The session's bouts from :func:`~pipeline.metrics.switching.find_bouts`.
    platform_groups : dict
        Platform code -> group. Every platform listed gets a row (zeros where it never
        appeared); codes seen but not listed get group 'ungrouped'.

    Returns
    -------
    DataFrame
        One row per platform, sorted by code: platform, group, in_view_seconds,
        attended_seconds, bouts, censored_bouts, dwell_median_s (Kaplan–Meier median of
        the platform's bouts; NaN without bouts or where survival never reaches 0.5).
    """
    return _platform_table(_seen_codes(timeline, bouts, platform_groups), bouts,
                           platform_groups)


def group_budget(timeline: pd.DataFrame, bouts: pd.DataFrame,
                 platform_groups: dict[str, str]) -> pd.DataFrame:
    """Time budget and dwell time per platform group.

    A coded second counts once for a group's ``in_view_seconds`` when any of the
    group's platforms is in view, and for its ``attended_seconds`` when the attended
    platform belongs to the group. ``bouts`` and ``dwell_median_s`` pool the bouts of
    the group's platforms as they are (bouts are per platform: a look moving from one
    screen to another of the same group is two bouts).

    Parameters
    ----------
    timeline, bouts, platform_groups
        As for :func:`platform_budget`.

    Returns
    -------
    DataFrame
        One row per group, sorted: group, platforms (how many codes it has),
        in_view_seconds, attended_seconds, bouts, censored_bouts, dwell_median_s.
    """
    return _group_table(_seen_codes(timeline, bouts, platform_groups), bouts, platform_groups)


def time_budget(timeline: pd.DataFrame, bouts: pd.DataFrame,
                platform_groups: dict[str, str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """:func:`platform_budget` and :func:`group_budget` together, counting the seconds once."""
    seen = _seen_codes(timeline, bouts, platform_groups)
    return (_platform_table(seen, bouts, platform_groups),
            _group_table(seen, bouts, platform_groups))
