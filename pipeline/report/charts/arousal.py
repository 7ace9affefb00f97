"""(e) Arousal peak, trough and range by media state and cohort."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import findings as F
from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles
from pipeline.types import STATES

MEASURES = {"arousal_p95": "peak (95th percentile)", "arousal_p05": "trough (5th percentile)",
            "arousal_range": "range (peak − trough)"}


def state_arousal(run: RunFiles, pal: Palette) -> Figure:
    states = run.table("states")
    long = states.melt(id_vars=["participant_id", "session_id", "cohort", "state"],
                       value_vars=list(MEASURES), var_name="measure", value_name="value")
    long["value"] = pd.to_numeric(long["value"], errors="coerce")
    long = long[np.isfinite(long["value"])]
    if long.empty:
        raise Missing("metrics/states.csv has no state with enough valid minutes for peak, "
                      "trough and range ([arousal] min_state_minutes)")
    long["measure"] = long["measure"].map(MEASURES)
    present = [s for s in STATES if s in set(long["state"])]
    cohorts = [c for c in run.cohorts if c in set(long["cohort"])]
    x = alt.X("state:N", sort=present, scale=alt.Scale(domain=present), title="media state",
              axis=alt.Axis(labelAngle=0))
    xo = alt.XOffset("cohort:N", sort=cohorts, scale=alt.Scale(domain=cohorts))
    points = alt.Chart().mark_point(filled=True, size=46, opacity=0.85, stroke="#000000",
                                    strokeWidth=0.4).encode(
        x=x, xOffset=xo, y=alt.Y("value:Q", title="arousal (z)"),
        color=alt.Color("cohort:N", scale=alt.Scale(**pal.cohort_scale()), title="cohort"),
        tooltip=[alt.Tooltip("participant_id:N", title="participant"),
                 alt.Tooltip("session_id:N", title="session"),
                 alt.Tooltip("value:Q", format=".2f")])
    medians = alt.Chart().mark_tick(color=P.ESTIMATE_COLOUR, thickness=3, size=26).encode(
        x=x, xOffset=xo, y=alt.Y("median(value):Q"))
    chart = alt.layer(points, medians, data=data(long)).properties(width=230, height=340).facet(
        column=alt.Column("measure:N", sort=list(MEASURES.values()), title=None)
    ).resolve_scale(y="independent")

    rng = long[long["measure"] == MEASURES["arousal_range"]].groupby("state")["value"].median()
    effs = _range_effects(run)
    q = float((run.config.get("models") or {}).get("fdr_q", 0.05))
    if effs:
        main = F.strongest(effs)
        finding = main.claim(run.reference_cohort)
        detail = main.statistics()
        model_text = (f" Model: {main.label(run.reference_cohort)}, {main.number()} "
                      f"({detail}; {'significant' if main.significant(q) else 'not significant'} "
                      f"after FDR correction).")
    else:
        bits = [f"{s} {fmt.auto(rng[s])} SD" for s in present if s in rng]
        finding = "Median arousal range by state: " + ", ".join(bits)
        detail = "descriptive: no model of arousal range or compression in comparisons.csv"
        model_text = ""
    sess = run.table("sessions")
    comp = (pd.to_numeric(sess["compression_ratio"], errors="coerce")
            if "compression_ratio" in sess.columns else pd.Series(dtype=float))
    comp = comp[np.isfinite(comp)]
    comp_text = (f" Median compression ratio (range multi / range single): "
                 f"{fmt.num(comp.median())} over {len(comp)} sessions." if len(comp) else "")
    n = long.groupby("state")["session_id"].size()
    caption = ("Each point is one session's peak, trough or range of arousal in a media "
               "state, shaded by cohort; black ticks: cohort medians.")
    method = ("Peak and trough are the 95th and 5th percentiles of arousal over a state's valid "
              "seconds, where the state has at least [arousal] min_state_minutes of them; range "
              "is their difference (study data contract §2). Session-state values: "
              + ", ".join(f"{s} {int(n.get(s, 0)) // len(MEASURES)}" for s in present)
              + "." + model_text + comp_text)
    return Figure("state_arousal", chart, finding, detail, caption, method,
                  from_model=bool(effs))


def _range_effects(run: RunFiles) -> list[F.Effect]:
    try:
        comp = run.table("comparisons")
    except Missing:
        return []
    return F.effects_for(F.effects(comp), ("compression_ratio", "arousal_range"))
