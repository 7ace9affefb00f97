"""(g) Forest plot of every model effect in comparisons.csv."""

from __future__ import annotations

import altair as alt
import pandas as pd

from pipeline.report import findings as F
from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, ratio_ticks
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

ROW_PX = 34


def _panel(df: pd.DataFrame, ratio: bool) -> alt.LayerChart:
    finite = df[["shown_low", "shown_high", "shown"]].stack()
    finite = finite[finite.apply(fmt.is_num)]
    null = 1.0 if ratio else 0.0
    lo, hi = min(finite.min(), null), max(finite.max(), null)
    if ratio:
        domain = [lo / 1.15, hi * 1.15]
    else:
        pad = (hi - lo) * 0.08 or 1.0
        domain = [lo - pad, hi + pad]
    xs = (alt.Scale(type="log", domain=domain, nice=False) if ratio
          else alt.Scale(type="linear", domain=domain, nice=False, zero=False))
    title = ("ratio, log scale (rows on the log scale of their model)" if ratio
             else "difference on the outcome's scale")
    y = alt.Y("label:N", sort=list(df["label"]), title=None,
              axis=alt.Axis(labelLimit=420))
    base = alt.Chart(data(df)).encode(y=y)
    axis = alt.Axis(values=ratio_ticks(domain)) if ratio else alt.Axis()
    rule = base.mark_rule(strokeWidth=2.2, color=P.ESTIMATE_COLOUR).encode(
        x=alt.X("shown_low:Q", scale=xs, title=title, axis=axis), x2="shown_high:Q")
    dot = base.mark_point(shape="circle", size=150, strokeWidth=2,
                          color=P.ESTIMATE_COLOUR).encode(
        x=alt.X("shown:Q", scale=xs),
        fill=alt.Fill("fdr:N", scale=alt.Scale(domain=["yes", "no"],
                                                range=[P.ESTIMATE_COLOUR, "#FFFFFF"]),
                      title="FDR-significant"),
        tooltip=[alt.Tooltip("label:N", title="effect"),
                 alt.Tooltip("shown:Q", title="estimate", format=".3f"),
                 alt.Tooltip("shown_low:Q", title="CI low", format=".3f"),
                 alt.Tooltip("shown_high:Q", title="CI high", format=".3f"),
                 alt.Tooltip("p_fdr:Q", title="FDR p", format=".3f")])
    nullrule = alt.Chart(data(pd.DataFrame({"x": [null]}))).mark_rule(
        strokeDash=[5, 4], color=P.NEUTRAL).encode(x=alt.X("x:Q", scale=xs))
    return alt.layer(nullrule, rule, dot).properties(width=P.WIDTH - 300,
                                                     height=ROW_PX * len(df))


def forest(run: RunFiles, pal: Palette) -> Figure:
    comp = run.table("comparisons")
    effs = F.ranked(F.effects(comp))
    if not effs:
        raise Missing("models/comparisons.csv has no effect besides intercepts")
    ref = run.reference_cohort
    q = float((run.config.get("models") or {}).get("fdr_q", 0.05))
    df = pd.DataFrame({
        "label": [e.label(ref) for e in effs], "ratio": [e.ratio for e in effs],
        "shown": [e.shown for e in effs], "shown_low": [e.shown_low for e in effs],
        "shown_high": [e.shown_high for e in effs], "p_fdr": [e.p_fdr for e in effs],
        "fdr": ["yes" if e.significant(q) else "no" for e in effs]})
    # a label must be unique on the axis: add the model where two rows coincide
    dup = df["label"].duplicated(keep=False)
    df.loc[dup, "label"] = [f"{lab} [{e.model}]" for lab, e, d in zip(df["label"], effs, dup) if d]
    panels = [_panel(df[df["ratio"] == r], r) for r in (True, False) if (df["ratio"] == r).any()]
    chart = panels[0] if len(panels) == 1 else alt.vconcat(*panels, spacing=30).resolve_scale(
        x="independent")
    k = sum(e.significant(q) for e in effs)
    top = F.strongest(effs)
    finding = f"{k} of {len(effs)} model effects hold after FDR correction (q = {q:g})"
    detail = f"smallest adjusted p: {top.claim(ref)} ({top.statistics()})"
    caption = ("Every model effect with its 95% confidence interval; filled: significant after "
               "Benjamini–Hochberg false-discovery-rate correction. Ratios (log-scale models) "
               "and differences are drawn on separate axes; dashed: no effect.")
    models = sorted({e.model for e in effs})
    method = (f"Estimates, intervals and p-values as written to models/comparisons.csv by the "
              f"models stage ({', '.join(models)}); {len(effs)} effects, intercepts left out.")
    return Figure("effects", chart, finding, detail, caption, method, from_model=True)
