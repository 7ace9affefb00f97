"""(c) Time budget: share of coded time attending each platform group, by cohort."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import STUDENT, Figure, Missing, data, mean_ci
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

NOTHING = "nothing attended"


def group_order(run: RunFiles, seen: set[str]) -> list[str]:
    declared = list(dict.fromkeys(run.platform_groups.values()))
    return [g for g in declared if g in seen] + sorted(seen - set(declared))


def participant_shares(platforms: pd.DataFrame, sessions: pd.DataFrame,
                       groups: list[str]) -> pd.DataFrame:
    """Per participant and group: attended seconds / coded seconds over all sessions.

    A participant who never attended a group counts as 0 for it; the remainder of
    the coded time, where nothing was attended, is the group ``nothing attended``.
    """
    coded = (sessions.assign(coded_s=sessions["coded_hours"].astype(float) * 3600.0)
             .groupby(["cohort", "participant_id"])["coded_s"].sum())
    att = (platforms.groupby(["cohort", "participant_id", "group"])["attended_seconds"]
           .sum().unstack("group").reindex(columns=groups).reindex(coded.index).fillna(0.0))
    share = att.div(coded.where(coded > 0), axis=0)
    share[NOTHING] = 1.0 - share.sum(axis=1, min_count=1)
    long = share.reset_index().melt(id_vars=["cohort", "participant_id"], var_name="group",
                                    value_name="share")
    return long[np.isfinite(long["share"].astype(float))]


def time_budget(run: RunFiles, pal: Palette) -> Figure:
    platforms = run.table("platforms", ["group", "attended_seconds"])
    sessions = run.table("sessions", ["coded_hours"])
    groups = group_order(run, set(platforms["group"].astype(str)))
    shares = participant_shares(platforms, sessions, groups)
    if shares.empty:
        raise Missing("no participant has coded seconds")
    order = groups + [NOTHING]
    cohorts = [c for c in run.cohorts if c in set(shares["cohort"])]
    rows = []
    for (cohort, group), g in shares.groupby(["cohort", "group"]):
        m, lo, hi, n = mean_ci(g["share"])
        rows.append({"cohort": cohort, "group": group, "share": m, "low": lo, "high": hi,
                     "n": n})
    summary = pd.DataFrame(rows)

    y = alt.Y("group:N", sort=order, title=None, scale=alt.Scale(domain=order))
    yo = alt.YOffset("cohort:N", sort=cohorts, scale=alt.Scale(domain=cohorts))
    xs = alt.Scale(domain=[0, 1], nice=False, clamp=True)
    dots = alt.Chart(data(summary)).mark_point(filled=True, size=190, stroke="#000000",
                                               strokeWidth=1.2, opacity=1).encode(
        y=y, yOffset=yo,
        x=alt.X("share:Q", title="mean share of coded time (95% CI across participants)",
                scale=xs, axis=alt.Axis(format="%", tickCount=5)),
        color=alt.Color("cohort:N", scale=alt.Scale(**pal.cohort_scale()), title="cohort"),
        tooltip=[alt.Tooltip("cohort:N"), alt.Tooltip("group:N"),
                 alt.Tooltip("share:Q", format=".1%"), alt.Tooltip("n:Q", title="participants")])
    errs = alt.Chart(data(summary)).mark_rule(color=P.ESTIMATE_COLOUR, strokeWidth=2).encode(
        y=y, yOffset=yo, x=alt.X("low:Q", scale=xs), x2="high:Q")
    chart = alt.layer(errs, dots).properties(
        width=P.WIDTH - 120, height=max(len(order) * (18 * len(cohorts) + 22), 160))

    main = (summary[summary["group"] != NOTHING].groupby("group")["share"].mean()
            .sort_values(ascending=False))
    if main.empty:
        raise Missing("metrics/platforms.csv has no attended seconds")
    top = str(main.index[0])
    per = summary[summary["group"] == top].set_index("cohort")["share"]
    finding = (f"Attention to {top}: " +
               ", ".join(f"{c} {fmt.pct(per[c])}" for c in cohorts if c in per) +
               " of coded time")
    n = shares.groupby("cohort")["participant_id"].nunique()
    detail = "; ".join(f"{c}: {n[c]} participants" for c in cohorts if c in n)
    caption = ("Mean share of each participant's coded time spent attending each platform "
               "group, by cohort (grey level), with its 95% confidence interval; the last row is the "
               "coded time in which nothing was attended.")
    method = ("Attended seconds per platform group (summed over the group's platforms, from "
              "metrics/platforms.csv) divided by the participant's coded seconds over all "
              "sessions; cohort means of the participant shares with Student-t 95% intervals "
              f"({detail}).")
    refs = [STUDENT]
    return Figure("time_budget", chart, finding, detail, caption, method, refs)
