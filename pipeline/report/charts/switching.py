"""(b) Switches per hour by cohort, (f) switch-locked arousal."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import findings as F
from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import (STUDENT, Figure, Missing, data, mean_ci,
                                            ratio_ticks, spread)
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles


def _cohort_effects(run: RunFiles, outcome: str) -> tuple[list[F.Effect], str]:
    """Cohort effects on ``outcome`` from comparisons.csv, or [] and why not."""
    try:
        comp = run.table("comparisons")
    except Missing as why:
        return [], str(why)
    effs = [e for e in F.effects(comp) if e.outcome == outcome and e.cohort_level() is not None]
    if not effs:
        return [], f"models/comparisons.csv has no cohort term for {outcome}"
    return effs, ""


def switch_rate(run: RunFiles, pal: Palette) -> Figure:
    s = run.table("sessions", ["switches_per_hour"])
    s = s[np.isfinite(s["switches_per_hour"].astype(float))].copy()
    if s.empty:
        raise Missing("no session has a switch rate (each had less multi-platform time "
                      "than [switching] min_multi_minutes)")
    cohorts = [c for c in run.cohorts if c in set(s["cohort"])]
    ref = run.reference_cohort
    parts = (s[["cohort", "participant_id"]].drop_duplicates()
             .sort_values(["cohort", "participant_id"]))
    parts["offset"] = np.concatenate(
        [spread(int((parts["cohort"] == c).sum())) for c in parts["cohort"].unique()])
    s = s.merge(parts, on=["cohort", "participant_id"])
    ranges = (s.groupby(["cohort", "participant_id", "offset"], as_index=False)
              ["switches_per_hour"].agg(low="min", high="max"))

    x = alt.X("cohort:N", sort=cohorts, title="cohort",
              scale=alt.Scale(domain=cohorts, paddingInner=0.25),
              axis=alt.Axis(labelAngle=0))
    xo = alt.XOffset("offset:Q", scale=alt.Scale(domain=[-0.5, 0.5]))
    grey = alt.Color("cohort:N", scale=alt.Scale(**pal.cohort_scale()), legend=None)
    joins = alt.Chart(data(ranges)).mark_rule(strokeWidth=1.2, color=P.NEUTRAL).encode(
        x=x, xOffset=xo, y=alt.Y("low:Q"), y2="high:Q")
    points = alt.Chart(data(s)).mark_point(filled=True, size=70, opacity=0.9,
                                           stroke="#000000", strokeWidth=0.6).encode(
        x=x, xOffset=xo, color=grey,
        y=alt.Y("switches_per_hour:Q", title="switches per multi-platform hour",
                scale=alt.Scale(zero=True)),
        tooltip=[alt.Tooltip("participant_id:N", title="participant"),
                 alt.Tooltip("session_id:N", title="session"),
                 alt.Tooltip("switches_per_hour:Q", title="switches/h", format=".1f")])
    left = alt.layer(joins, points).properties(width=max(150 * len(cohorts), 300), height=380)

    effs, why_not = _cohort_effects(run, "switches_per_hour")
    n_sessions, n_people = len(s), s["participant_id"].nunique()
    if effs:
        eff_df = pd.DataFrame({
            "contrast": [e.term_label(ref) for e in effs],
            "estimate": [e.shown for e in effs], "low": [e.shown_low for e in effs],
            "high": [e.shown_high for e in effs], "p": [e.p_value for e in effs]})
        ratio = effs[0].ratio
        null = effs[0].null_value
        domain = _domain(eff_df, null, ratio)
        xs = (alt.Scale(type="log", nice=False, domain=domain) if ratio
              else alt.Scale(type="linear", zero=False, nice=False, domain=domain))
        axis = alt.Axis(values=ratio_ticks(domain)) if ratio else alt.Axis()
        title = f"{effs[0].kind} vs {ref} (95% CI)"
        base = alt.Chart(data(eff_df)).encode(
            y=alt.Y("contrast:N", title=None, sort=list(eff_df["contrast"])))
        rule = base.mark_rule(strokeWidth=2.5, color=P.ESTIMATE_COLOUR).encode(
            x=alt.X("low:Q", scale=xs, title=title, axis=axis), x2="high:Q")
        dot = base.mark_point(shape="diamond", filled=True, size=220,
                              color=P.ESTIMATE_COLOUR).encode(
            x=alt.X("estimate:Q", scale=xs),
            tooltip=[alt.Tooltip("estimate:Q", format=".2f"), alt.Tooltip("low:Q", format=".2f"),
                     alt.Tooltip("high:Q", format=".2f"), alt.Tooltip("p:Q", format=".3f")])
        nullrule = alt.Chart(data(pd.DataFrame({"x": [null]}))).mark_rule(
            strokeDash=[5, 4], color=P.NEUTRAL).encode(x=alt.X("x:Q", scale=xs))
        right = alt.layer(nullrule, rule, dot).properties(width=300,
                                                          height=max(60 * len(effs), 120))
        chart = alt.hconcat(left, right, spacing=40).resolve_scale(color="independent")
        main = F.primary_effect(effs)
        q = float((run.config.get("models") or {}).get("fdr_q", 0.05))
        finding = main.claim(ref)
        detail = main.statistics()
        method = (f"Points: the switch rate of each session with at least the configured "
                  f"multi-platform time ({n_sessions} sessions of {n_people} participants); a "
                  f"line joins one participant's sessions. Right: the {main.model} model's "
                  f"cohort {effs[0].kind} with its 95% confidence interval "
                  f"({'significant' if main.significant(q) else 'not significant'} after "
                  f"false-discovery-rate correction at q = {q:g}).")
    else:
        chart = left
        meds = s.groupby("cohort")["switches_per_hour"].median()
        finding = ("Median switches per multi-platform hour: " +
                   ", ".join(f"{c} {fmt.auto(meds[c])}" for c in cohorts))
        detail = f"no model estimate: {why_not}"
        method = (f"Switch rate of each session with at least the configured multi-platform "
                  f"time ({n_sessions} sessions of {n_people} participants); medians per "
                  f"cohort. No model estimate is shown because {why_not}.")
    caption = ("Each point is one session; a line joins the sessions of one participant. "
               + ("Right: the model's cohort effect and its 95% confidence interval; the "
                  "dashed line marks no difference." if effs else ""))
    return Figure("switch_rate", chart, finding, detail, caption, method, from_model=bool(effs))


def _domain(df: pd.DataFrame, null: float, ratio: bool) -> list[float]:
    vals = np.concatenate([df[["estimate", "low", "high"]].to_numpy(float).ravel(), [null]])
    vals = vals[np.isfinite(vals) & ((vals > 0) if ratio else True)]
    lo, hi = float(vals.min()), float(vals.max())
    if ratio:
        return [lo / 1.15, hi * 1.15]
    pad = (hi - lo) * 0.1 or 1.0
    return [lo - pad, hi + pad]


# ------------------------------------------------------------- switch-locked arousal
LAG_COLUMNS = ("lag_s", "offset_s", "relative_s", "time_s", "t_s")
VALUE_COLUMNS = ("arousal_mean", "mean_arousal", "arousal", "mean")


def switch_locked_curve(table: pd.DataFrame, lag: str, value: str) -> pd.DataFrame:
    """Mean arousal per lag (and cohort) with its 95% CI across participants.

    Rows of one participant are averaged first, so a participant with many switches
    does not outweigh the others; the interval is the Student-t interval of the
    participant means.
    """
    keys = ["cohort"] if "cohort" in table.columns else []
    t = table[keys + ["participant_id", lag, value]].copy()
    t[value] = pd.to_numeric(t[value], errors="coerce")
    per = t.groupby(keys + ["participant_id", lag], as_index=False)[value].mean()
    rows = []
    for k, g in per.groupby(keys + [lag]):
        k = k if isinstance(k, tuple) else (k,)
        m, lo, hi, n = mean_ci(g[value])
        rows.append(dict(zip(keys + [lag], k), mean=m, low=lo, high=hi, n=n))
    return pd.DataFrame(rows).rename(columns={lag: "lag_s"})


def switch_locked(run: RunFiles, pal: Palette) -> Figure:
    table = run.table("switch_locked")
    lag = run.pick("switch_locked", *LAG_COLUMNS)
    value = run.pick("switch_locked", *VALUE_COLUMNS)
    if "participant_id" in table.columns:
        curve = switch_locked_curve(table, lag, value)
        n_people = table["participant_id"].nunique()
    else:
        cols = {lag: "lag_s", value: "mean"}
        for a, b in (("ci_low", "low"), ("ci_high", "high")):
            if a in table.columns:
                cols[a] = b
        curve = table.rename(columns=cols)
        n_people = int(table["n_participants"].max()) if "n_participants" in table else None
    curve = curve[np.isfinite(curve["mean"].astype(float))]
    if curve.empty:
        raise Missing("metrics/switch_locked.csv has no finite arousal values")
    has_cohort = "cohort" in curve.columns
    cohorts = [c for c in run.cohorts if has_cohort and c in set(curve["cohort"])]

    base_lo, base_hi, base_text = _baseline(run, table, curve, lag)
    x = alt.X("lag_s:Q", title="seconds from switch")
    layers = []
    if base_lo is not None:
        layers.append(alt.Chart(data(pd.DataFrame({"low": [base_lo], "high": [base_hi]})))
                      .mark_rect(color=P.BAND, opacity=0.7)
                      .encode(y=alt.Y("low:Q"), y2="high:Q"))
    enc = {"strokeDash": alt.StrokeDash("cohort:N", scale=alt.Scale(**pal.cohort_dash_scale()),
                                        title="cohort")} if has_cohort else {}
    if "low" in curve.columns:
        band_enc = ({"opacity": alt.value(0.25),
                     "color": alt.Color("cohort:N", scale=alt.Scale(**pal.cohort_scale()),
                                        legend=None)} if has_cohort else {})
        layers.append(alt.Chart(data(curve)).mark_area(
            color=P.NEUTRAL, opacity=0.25, invalid="break-paths-filter-domains").encode(
            x=x, y=alt.Y("low:Q"), y2="high:Q", **band_enc))
    layers.append(alt.Chart(data(curve)).mark_line(
        color=P.ESTIMATE_COLOUR, strokeWidth=2.5).encode(
        x=x, y=alt.Y("mean:Q", title="arousal (z)"), **enc))
    layers.append(alt.Chart(data(pd.DataFrame({"x": [0]}))).mark_rule(
        color=P.NEUTRAL, strokeDash=[4, 4]).encode(x="x:Q"))
    chart = alt.layer(*layers).properties(width=P.WIDTH, height=380)

    pooled = curve.groupby("lag_s")["mean"].mean()
    peak_lag = float(pooled.idxmax())
    peak = float(pooled.max())
    finding = (f"Arousal peaks at {fmt.auto(peak)} SD, {fmt.short(abs(peak_lag))} s "
               f"{'after' if peak_lag > 0 else 'before' if peak_lag < 0 else 'at'} the switch"
               if peak_lag != 0 else f"Arousal peaks at the switch ({fmt.auto(peak)} SD)")
    if base_hi is not None:
        finding += (", above the baseline band" if peak > base_hi
                    else ", within the baseline band")
    detail = base_text
    n_text = f"{n_people} participants" if n_people else "participants"
    caption = ("Mean arousal around each switch (0 = the switch) with its 95% confidence "
               "interval; grey band: the baseline." + (" Line dash: cohort." if has_cohort else ""))
    method = (f"Arousal aligned on each switch and averaged within participants, then across "
              f"{n_text}; the interval is the Student-t interval of the participant means. "
              f"{base_text}")
    refs = [STUDENT]
    return Figure("switch_locked", chart, finding, detail, caption, method, refs)


def _baseline(run: RunFiles, table: pd.DataFrame, curve: pd.DataFrame, lag: str):
    """Baseline band (low, high, description) from the table, else its pre-switch part."""
    for lo_c, hi_c in (("baseline_low", "baseline_high"), ("baseline_ci_low", "baseline_ci_high")):
        if lo_c in table.columns and hi_c in table.columns:
            lo = float(pd.to_numeric(table[lo_c], errors="coerce").mean())
            hi = float(pd.to_numeric(table[hi_c], errors="coerce").mean())
            if np.isfinite(lo) and np.isfinite(hi):
                return lo, hi, (f"Baseline band {fmt.auto(lo)} to {fmt.auto(hi)} SD, "
                                "as written by the switch-locked stage.")
    if "baseline" in table.columns:
        flag = table["baseline"].astype(str).str.lower().isin(["true", "1"])
        window = table.loc[flag, lag]
    else:
        lags = np.sort(curve["lag_s"].unique())
        pre = lags[lags < 0]
        if pre.size < 2:
            return None, None, "No baseline band: the table has no pre-switch seconds."
        window = pre[: max(1, pre.size // 3)]
    sel = curve[curve["lag_s"].isin(np.asarray(window, dtype=float))]
    if sel.empty:
        return None, None, "No baseline band: no rows fall in the baseline window."
    m, lo, hi, n = mean_ci(sel["mean"])
    if not np.isfinite(lo):
        return None, None, "No baseline band: too few baseline seconds."
    w = np.asarray(window, dtype=float)
    return lo, hi, (f"Baseline band: 95% interval of the mean arousal from "
                    f"{fmt.short(w.min())} to {fmt.short(w.max())} s ({fmt.auto(lo)} to "
                    f"{fmt.auto(hi)} SD).")
