"""(d) Dwell time: Kaplan–Meier curves by platform and cohort."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles
from pipeline.report.survival import kaplan_meier, km_median

DURATION_COLUMNS = ("duration_s", "dwell_s", "length_s", "bout_s")
KM_REFERENCE = ("Kaplan, E. L. & Meier, P. (1958). Nonparametric estimation from incomplete "
                "observations. Journal of the American Statistical Association 53:457–481.")


def observed_flags(bouts: pd.DataFrame) -> pd.Series:
    """True where a bout's end was observed (not right-censored)."""
    for col, censored in (("censored", True), ("right_censored", True),
                          ("observed", False), ("event", False), ("ended", False)):
        if col in bouts.columns:
            flag = bouts[col].astype("boolean").fillna(False).astype(bool)
            return ~flag if censored else flag
    raise Missing("metrics/bouts.csv has no censoring column ('censored' or 'observed')")


def dwell_curves(run: RunFiles, pal: Palette) -> Figure:
    bouts = run.table("bouts", ["platform"])
    dur = run.pick("bouts", *DURATION_COLUMNS)
    if "cohort" not in bouts.columns:
        cohorts = run.table("sessions")[["participant_id", "session_id", "cohort"]]
        bouts = bouts.merge(cohorts, on=["participant_id", "session_id"], how="left")
    b = pd.DataFrame({"platform": bouts["platform"].astype(str),
                      "cohort": bouts["cohort"].astype(str),
                      "duration": pd.to_numeric(bouts[dur], errors="coerce"),
                      "observed": observed_flags(bouts).to_numpy()})
    b = b[np.isfinite(b["duration"]) & (b["duration"] > 0)]
    if b.empty:
        raise Missing("metrics/bouts.csv has no bout with a positive length")
    start = float(min(1.0, b["duration"].min()))
    curves, medians = [], []
    for (code, cohort), g in b.groupby(["platform", "cohort"]):
        km = kaplan_meier(g["duration"], g["observed"])
        km = pd.concat([pd.DataFrame({"time_s": [start], "survival": [1.0]}),
                        km[["time_s", "survival"]]], ignore_index=True)
        curves.append(km.assign(platform=pal.label(code), cohort=cohort))
        medians.append({"platform": code, "cohort": cohort, "bouts": len(g),
                        "median_s": km_median(km.iloc[1:])})
    curve = pd.concat(curves, ignore_index=True)
    med = pd.DataFrame(medians)
    cohorts = [c for c in run.cohorts if c in set(b["cohort"])]
    top = float(np.nanpercentile(b["duration"], 99))

    width = int(P.WIDTH / max(len(cohorts), 1)) - 20
    chart = alt.Chart(data(curve)).mark_line(interpolate="step-after", strokeWidth=2.4,
                                             clip=True).encode(
        x=alt.X("time_s:Q", title="dwell time (s, log scale)",
                scale=alt.Scale(type="log", domain=[start, max(top, start * 10)], nice=False)),
        y=alt.Y("survival:Q", title="share of bouts still going", axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=[0, 1])),
        color=alt.Color("platform:N", scale=alt.Scale(**pal.platform_scale()), title="platform"),
    ).properties(width=width, height=380).facet(
        column=alt.Column("cohort:N", sort=cohorts, title=None))

    pooled = []
    for code, g in b.groupby("platform"):
        pooled.append((code, km_median(kaplan_meier(g["duration"], g["observed"])), len(g)))
    order = {c: i for i, c in enumerate(pal.platforms)}
    pooled.sort(key=lambda t: order.get(t[0], 1e9))
    shown = sorted(pooled, key=lambda t: -t[2])[:4]
    shown.sort(key=lambda t: order.get(t[0], 1e9))
    finding = "Median dwell (Kaplan–Meier): " + ", ".join(
        f"{pal.label(c)} {fmt.short(m) + ' s' if fmt.is_num(m) else 'not reached'}"
        for c, m, _ in shown)
    censored = 1.0 - float(b["observed"].mean())
    detail = (f"{fmt.count(len(b))} bouts, {fmt.pct(censored)} right-censored; "
              f"{b['platform'].nunique()} platforms, {len(cohorts)} cohorts")
    per = "; ".join(f"{pal.label(r.platform)} in {r.cohort}: "
                    f"{fmt.short(r.median_s) + ' s' if fmt.is_num(r.median_s) else 'not reached'}"
                    f" (n = {r.bouts})" for r in med.itertuples())
    caption = ("Share of attention bouts still going after each dwell time, by platform "
               "(colour), one panel per cohort. Bouts cut by a session edge, an uncoded gap or "
               "invalid signal are right-censored.")
    method = (f"Kaplan–Meier product-limit curves of bout length, bouts pooled within "
              f"platform and cohort ({detail}). Medians: {per}.")
    return Figure("dwell", chart, finding, detail, caption, method, [KM_REFERENCE])

