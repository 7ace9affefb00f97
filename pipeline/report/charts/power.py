"""(i) Power curve from a `power` run."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

TARGET = 0.8  # common practice: the conventional power target (Cohen 1988)
COHEN_1988 = ("Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, "
              "2nd ed. Lawrence Erlbaum.")


def power_curve(run: RunFiles, pal: Palette) -> Figure:
    pw = run.table("power").copy()
    for c in ("participants_per_cohort", "power", "ci_low", "ci_high"):
        pw[c] = pd.to_numeric(pw[c], errors="coerce")
    pw = pw[np.isfinite(pw["participants_per_cohort"]) & np.isfinite(pw["power"])]
    if pw.empty:
        raise Missing("power/power.csv has no finite power value")
    pw = pw.sort_values("participants_per_cohort")
    cfg = run.config.get("power") or {}
    target = float(cfg.get("target", TARGET)) if isinstance(cfg, dict) else TARGET
    x = alt.X("participants_per_cohort:Q", title="participants per cohort",
              scale=alt.Scale(zero=False))
    ys = alt.Scale(domain=[0, 1])
    band = alt.Chart(data(pw)).mark_area(color=P.NEUTRAL, opacity=0.2).encode(
        x=x, y=alt.Y("ci_low:Q", scale=ys), y2="ci_high:Q")
    line = alt.Chart(data(pw)).mark_line(color=P.ESTIMATE_COLOUR, strokeWidth=2.5,
                                         point=alt.OverlayMarkDef(size=70, filled=True)).encode(
        x=x, y=alt.Y("power:Q", title="power (95% CI)", scale=ys, axis=alt.Axis(format="%")),
        tooltip=[alt.Tooltip("participants_per_cohort:Q", title="per cohort"),
                 alt.Tooltip("power:Q", format=".1%")])
    rule = alt.Chart(data(pd.DataFrame({"y": [target]}))).mark_rule(
        strokeDash=[5, 4], color=P.NEUTRAL).encode(y=alt.Y("y:Q", scale=ys))
    chart = alt.layer(band, line, rule).properties(width=P.WIDTH, height=360)
    reached = pw[pw["power"] >= target]
    if len(reached):
        n = int(reached["participants_per_cohort"].iloc[0])
        finding = (f"{fmt.pct(target)} power needs {n} participants per cohort "
                   f"(estimated power {fmt.pct(reached['power'].iloc[0])})")
    else:
        finding = (f"Power stays below {fmt.pct(target)} up to "
                   f"{int(pw['participants_per_cohort'].max())} participants per cohort "
                   f"(at most {fmt.pct(pw['power'].max())})")
    first = pw.iloc[0]
    bits = []
    if "rate_ratio" in pw.columns:
        bits.append(f"switch-rate ratio {fmt.short(first['rate_ratio'])}"
                    + (f" (simulated: {fmt.num(first['true_rate_ratio'])})"
                       if fmt.is_num(first.get("true_rate_ratio")) else ""))
    if "sessions_per_participant" in pw.columns and "session_hours" in pw.columns:
        bits.append(f"{int(first['sessions_per_participant'])} sessions of "
                    f"{fmt.short(first['session_hours'])} h per participant")
    if "n_simulations" in pw.columns:
        bits.append(f"{int(first['n_simulations'])} simulated studies per size")
    if "alpha" in pw.columns:
        bits.append(f"α = {fmt.short(first['alpha'])}")
    if not bits and isinstance(cfg, dict) and cfg:
        bits = [f"{k} = {v}" for k, v in cfg.items()]
    detail = "; ".join(bits) if bits else f"{len(pw)} sample sizes simulated"
    interval = str(first["interval"]).replace("_", "-") if "interval" in pw.columns else ""
    caption = (f"Share of simulated studies in which the cohort effect on the switch rate is "
               f"significant, with its 95% {interval + ' ' if interval else ''}interval; "
               f"dashed: the {fmt.pct(target)} target.")
    method = (f"Simulation-based power (`screenweave power`) at {len(pw)} sample sizes; "
              f"{detail}.")
    return Figure("power", chart, finding, detail, caption, method, [COHEN_1988])
