"""Coder agreement per double-coded session (when `agree` has run)."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, spread
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

MEASURES = {"kappa_attended": "κ attended platform", "kappa_state": "κ media state",
            "switch_f1": "switch F1"}
#: Landis & Koch (1977) bands: 0.61-0.80 "substantial", 0.81-1.00 "almost perfect".
BANDS = (0.61, 0.81)
LANDIS_KOCH = ("Landis, J. R. & Koch, G. G. (1977). The measurement of observer agreement "
               "for categorical data. Biometrics 33:159–174.")
COHEN = ("Cohen, J. (1960). A coefficient of agreement for nominal scales. Educational and "
         "Psychological Measurement 20:37–46.")


def agreement(run: RunFiles, pal: Palette) -> Figure:
    ag = run.table("agreement")
    long = ag.melt(id_vars=["participant_id", "session_id", "coder_a", "coder_b"],
                   value_vars=list(MEASURES), var_name="measure", value_name="value")
    long["value"] = pd.to_numeric(long["value"], errors="coerce")
    long = long[np.isfinite(long["value"])].copy()
    if long.empty:
        raise Missing("agreement/sessions.csv has no finite agreement value")
    long["measure"] = long["measure"].map(MEASURES)
    long["offset"] = 0.0
    for m, idx in long.groupby("measure").groups.items():
        long.loc[idx, "offset"] = spread(len(idx), 0.5)
    order = list(MEASURES.values())
    y = alt.Y("measure:N", sort=order, title=None, scale=alt.Scale(domain=order))
    yo = alt.YOffset("offset:Q", scale=alt.Scale(domain=[-0.5, 0.5]))
    xs = alt.Scale(domain=[min(0.0, float(long["value"].min())), 1])
    bands = alt.Chart(data(pd.DataFrame({"x": list(BANDS)}))).mark_rule(
        strokeDash=[5, 4], color=P.NEUTRAL).encode(x=alt.X("x:Q", scale=xs))
    points = alt.Chart(data(long)).mark_point(filled=True, size=80, color=P.NEUTRAL,
                                              opacity=0.9).encode(
        y=y, yOffset=yo, x=alt.X("value:Q", scale=xs, title="agreement (1 = perfect)"),
        tooltip=[alt.Tooltip("participant_id:N", title="participant"),
                 alt.Tooltip("session_id:N", title="session"),
                 alt.Tooltip("coder_a:N"), alt.Tooltip("coder_b:N"),
                 alt.Tooltip("value:Q", format=".3f")])
    medians = alt.Chart(data(long)).mark_tick(color=P.ESTIMATE_COLOUR, thickness=3,
                                              size=40).encode(
        y=y, x=alt.X("median(value):Q", scale=xs))
    chart = alt.layer(bands, points, medians).properties(width=P.WIDTH, height=270)
    n = len(ag)
    med = long.groupby("measure")["value"].median()
    finding = (f"Coders agree on the attended platform: median κ "
               f"{fmt.num(med.get(MEASURES['kappa_attended']))} over {n} double-coded "
               f"session{'s' if n != 1 else ''}")
    detail = "; ".join(f"median {m} {fmt.num(med[m])}" for m in order if m in med)
    seconds = pd.to_numeric(ag["seconds_compared"], errors="coerce").sum()
    tol = (run.config.get("agreement") or {}).get("switch_tolerance_s", 2)
    caption = ("Each point is one double-coded session: Cohen's κ for the attended platform "
               "and the media state, and the F1 score of switch matching; dashed lines at "
               "0.61 and 0.81 (substantial / almost perfect, Landis & Koch 1977).")
    method = (f"Agreement of coder_b with the reference coder_a over {fmt.count(seconds)} "
              f"seconds coded by both, {n} session-pairs. Switches match one-to-one within "
              f"{tol} s with the same platforms. {detail}.")
    return Figure("agreement", chart, finding, detail, caption, method, [COHEN, LANDIS_KOCH])
