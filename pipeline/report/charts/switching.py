"""(b) Switches per hour by cohort, (f) switch-locked arousal."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import findings as F
from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, ratio_ticks, spread
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
def _pre_window(run: RunFiles) -> int | None:
    pre = (run.config.get("models") or {}).get("switch_locked_pre_s")
    return int(pre) if fmt.is_num(pre) else None


def switch_locked(run: RunFiles, pal: Palette) -> Figure:
    """Arousal around switches against the pseudo-switch baseline, per cohort.

    Reads the cohort rows of metrics/switch_locked.csv (the trajectory around real
    switches with its interval, and around pseudo-switches, whose interval is the
    baseline band) and the pre-switch test of models/switch_locked_test.csv.
    """
    table = run.table("switch_locked")
    level = "cohort" if (table["level"] == "cohort").any() else "all"
    t = table[table["level"] == level].copy()
    if t.empty:
        raise Missing("metrics/switch_locked.csv has no cohort-level or all-participant rows")
    if level == "all":
        t["cohort"] = "all participants"
    cohorts = [c for c in run.cohorts if c in set(t["cohort"])] or ["all participants"]
    x = alt.X("lag_s:Q", title="seconds from switch")
    band = alt.Chart().mark_area(color=P.BAND, opacity=0.9).encode(
        x=x, y=alt.Y("baseline_ci_low:Q"), y2="baseline_ci_high:Q")
    pseudo = alt.Chart().mark_line(color=P.NEUTRAL, strokeDash=[5, 3], strokeWidth=1.6).encode(
        x=x, y=alt.Y("arousal_pseudo_z:Q"))
    ci = alt.Chart().mark_area(color=P.NEUTRAL, opacity=0.35).encode(
        x=x, y=alt.Y("switch_ci_low:Q"), y2="switch_ci_high:Q")
    line = alt.Chart().mark_line(color=P.ESTIMATE_COLOUR, strokeWidth=2.4).encode(
        x=x, y=alt.Y("arousal_switch_z:Q", title="arousal (z)"),
        tooltip=[alt.Tooltip("lag_s:Q", title="s from switch"),
                 alt.Tooltip("arousal_switch_z:Q", title="switches", format=".3f"),
                 alt.Tooltip("arousal_pseudo_z:Q", title="pseudo-switches", format=".3f")])
    zero = alt.Chart().mark_rule(color=P.NEUTRAL, strokeDash=[2, 2]).encode(
        x=alt.datum(0))
    layers = [band, pseudo, ci, line, zero]
    pre = _pre_window(run)
    if pre:
        layers.append(alt.Chart().mark_rule(color=P.NEUTRAL, strokeDash=[2, 2]).encode(
            x=alt.datum(-pre)))
    width = int(P.WIDTH / max(len(cohorts), 1)) - 20
    chart = alt.layer(*layers, data=data(t)).properties(width=width, height=340).facet(
        column=alt.Column("cohort:N", sort=cohorts, title=None))

    test = _switch_locked_test(run)
    window = f"the {pre} s" if pre else "the seconds"
    if test is not None:
        finding = (f"Over {window} before a switch, arousal {test['direction']} relative to "
                   f"pseudo-switches (change {fmt.num(test['change_z'], 3)} z)")
        detail = (f"slope {fmt.num(test['slope_z_per_s'], 4)} z/s, 95% CI "
                  f"{fmt.interval(test['ci_low'], test['ci_high'], 4)}; "
                  f"{fmt.p_value(test['p_value'])}; {int(test['n_participants'])} participants")
    else:
        diff = t.groupby("lag_s")["arousal_switch_z"].mean() - \
            t.groupby("lag_s")["arousal_pseudo_z"].mean()
        lag = float(diff.abs().idxmax())
        finding = (f"Largest gap to pseudo-switches: {fmt.num(diff.loc[lag])} z at "
                   f"{fmt.short(lag)} s from the switch")
        detail = "no pre-switch test: models/switch_locked_test.csv was not written"
    n_sw = (pd.to_numeric(t["n_switches"], errors="coerce") if "n_switches" in t.columns
            else pd.Series(dtype=float))
    n_text = (f"{fmt.count(n_sw.groupby(t['cohort']).max().sum())} switches"
              if n_sw.notna().any() else "the switches")
    caption = ("Mean arousal around switches (black, 95% interval dark grey) and around "
               "pseudo-switches at random times (dashed; its 95% interval is the light grey "
               "baseline band), per cohort; 0 is the switch"
               + (f", the dotted line {pre} s before it opens the tested window." if pre else "."))
    method = (f"Switch-locked trajectories as written to metrics/switch_locked.csv "
              f"({level} rows, {n_text}); pre-switch test from models/switch_locked_test.csv. "
              f"{detail}.")
    return Figure("switch_locked", chart, finding, detail, caption, method)


def _switch_locked_test(run: RunFiles) -> dict | None:
    try:
        test = run.table("switch_locked_test", ["scope", "slope_z_per_s", "ci_low", "ci_high",
                                               "change_z", "p_value", "direction"])
    except Missing:
        return None
    rows = test[test["scope"] == "all"]
    return rows.iloc[0].to_dict() if len(rows) else None
