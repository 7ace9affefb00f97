"""Time budget per platform and per platform group of one session.

Only coded seconds count. A platform's ``in_view_seconds`` are the coded seconds it was
in view, its ``attended_seconds`` those it was the attended platform. A second counts
for a group when any of the group's platforms is in view (once, however many are) or
when the attended platform belongs to the group. Bouts and dwell medians come from the
attention bouts of :func:`pipeline.metrics.switching.find_bouts`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.metrics.dwell import km_median

#: Group of a platform code seen in the log but missing from the vocabulary.
UNGROUPED = "ungrouped"


def _platform_list(timeline: pd.DataFrame, bouts: pd.DataFrame,
                   platform_groups: dict[str, str]) -> list[str]:
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    seen = set(platform_groups)
    # a session has few distinct in-view combinations: split each once
    for cell in timeline.loc[coded, "in_view"].dropna().unique():
        seen.update(c for c in str(cell).split(";") if c)
    seen.update(str(c) for c in timeline.loc[coded, "attended"].dropna().unique() if c)
    seen.update(bouts["platform"].astype(str).unique())
    return sorted(seen)


def _in_view_matrix(timeline: pd.DataFrame, platforms: list[str]) -> pd.DataFrame:
    """Coded seconds x platforms, 1 where the platform is in view."""
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    in_view = timeline.loc[coded, "in_view"].fillna("")
    rows, combos = pd.factorize(in_view)
    column = {p: j for j, p in enumerate(platforms)}
    table = np.zeros((max(len(combos), 1), len(platforms)), dtype=np.int64)
    for u, cell in enumerate(combos):  # one iteration per distinct combination
        for code in str(cell).split(";"):
            if code in column:
                table[u, column[code]] = 1
    return pd.DataFrame(table[rows] if len(rows) else np.zeros((0, len(platforms)), np.int64),
                        columns=platforms, index=in_view.index)


def _bout_summary(bouts: pd.DataFrame, key: pd.Series) -> pd.DataFrame:
    """bouts, censored_bouts and KM dwell median per value of ``key`` (aligned to bouts)."""
    rows = {}
    observed = ~bouts["censored"].to_numpy(dtype=bool)
    durations = bouts["duration_s"].to_numpy(dtype=float)
    keys = key.to_numpy(dtype=object)
    for k in pd.unique(keys):  # one iteration per platform (or group), not per second
        sel = keys == k
        rows[k] = {
            "bouts": int(sel.sum()),
            "censored_bouts": int((~observed[sel]).sum()),
            "dwell_median_s": km_median(durations[sel], observed[sel]),
        }
    table = pd.DataFrame.from_dict(rows, orient="index",
                                   columns=["bouts", "censored_bouts", "dwell_median_s"])
    return table.astype({"bouts": np.int64, "censored_bouts": np.int64, "dwell_median_s": float})


def _counts(values: pd.Series, index: list[str]) -> np.ndarray:
    """``values`` (a count per key) read at ``index``, 0 where a key is missing."""
    return values.reindex(index, fill_value=0).astype(np.int64).to_numpy()


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
    platforms = _platform_list(timeline, bouts, platform_groups)
    in_view = _in_view_matrix(timeline, platforms).sum(axis=0)
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    attended = timeline.loc[coded, "attended"].dropna().astype(str)
    attended_counts = attended[attended != ""].value_counts()
    summary = _bout_summary(bouts, bouts["platform"].astype(str))
    out = pd.DataFrame({"platform": platforms})
    out["group"] = [platform_groups.get(p, UNGROUPED) for p in platforms]
    out["in_view_seconds"] = _counts(in_view, platforms)
    out["attended_seconds"] = _counts(attended_counts, platforms)
    out["bouts"] = _counts(summary["bouts"], platforms)
    out["censored_bouts"] = _counts(summary["censored_bouts"], platforms)
    out["dwell_median_s"] = summary["dwell_median_s"].reindex(platforms).astype(float).to_numpy()
    return out


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
    platforms = _platform_list(timeline, bouts, platform_groups)
    group_of = {p: platform_groups.get(p, UNGROUPED) for p in platforms}
    groups = sorted(set(group_of.values()))
    matrix = _in_view_matrix(timeline, platforms)
    if matrix.shape[1]:
        any_in_view = (matrix.T.groupby(pd.Series(group_of)).max().T > 0).sum(axis=0)
    else:
        any_in_view = pd.Series(dtype=np.int64)
    coded = timeline["coded"].fillna(False).to_numpy(dtype=bool)
    attended = timeline.loc[coded, "attended"].dropna().astype(str)
    attended_groups = attended[attended != ""].map(group_of).value_counts()
    summary = _bout_summary(bouts, bouts["platform"].astype(str).map(group_of))
    counts = pd.Series(group_of).value_counts()
    out = pd.DataFrame({"group": groups})
    out["platforms"] = _counts(counts, groups)
    out["in_view_seconds"] = _counts(any_in_view, groups)
    out["attended_seconds"] = _counts(attended_groups, groups)
    out["bouts"] = _counts(summary["bouts"], groups)
    out["censored_bouts"] = _counts(summary["censored_bouts"], groups)
    out["dwell_median_s"] = summary["dwell_median_s"].reindex(groups).astype(float).to_numpy()
    return out
