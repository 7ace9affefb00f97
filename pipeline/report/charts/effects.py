"""(g) Forest plot of the model effects in comparisons.csv."""

from __future__ import annotations

import altair as alt
import pandas as pd

from pipeline.report import findings as F
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, ratio_ticks
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

ROW_PX = 24
STATUS = {"yes": P.ESTIMATE_COLOUR, "no": "#FFFFFF"}


def _panel(df: pd.DataFrame, ratio: bool, unit: str, width: int) -> alt.LayerChart:
    finite = pd.to_numeric(df[["shown_low", "shown_high", "shown"]].stack(), errors="coerce")
    finite = finite[finite.notna()]
    null = 1.0 if ratio else 0.0
    lo, hi = min(finite.min(), null), max(finite.max(), null)
    if ratio:
        domain = [lo / 1.12, hi * 1.12]
        xs = alt.Scale(type="log", domain=domain, nice=False)
        axis = alt.Axis(values=ratio_ticks(domain), title="ratio (log scale)")
    else:
        pad = (hi - lo) * 0.08 or 1.0
        domain = [lo - pad, hi + pad]
        xs = alt.Scale(type="linear", domain=domain, nice=False, zero=False)
        axis = alt.Axis(title=f"difference ({unit})" if unit else "difference", tickCount=6)
    y = alt.Y("label:N", sort=list(df["label"]), title=None, axis=alt.Axis(labelLimit=520))
    base = alt.Chart(data(df)).encode(y=y)
    rule = base.mark_rule(strokeWidth=2.2, color=P.ESTIMATE_COLOUR).encode(
        x=alt.X("shown_low:Q", scale=xs, axis=axis), x2="shown_high:Q")
    dot = base.mark_point(shape="circle", size=130, strokeWidth=2,
                          color=P.ESTIMATE_COLOUR).encode(
        x=alt.X("shown:Q", scale=xs),
        fill=alt.Fill("fdr:N", scale=alt.Scale(domain=list(STATUS), range=list(STATUS.values())),
                      title="FDR-significant"),
        tooltip=[alt.Tooltip("label:N", title="effect"),
                 alt.Tooltip("shown:Q", title="estimate", format=".3f"),
                 alt.Tooltip("shown_low:Q", title="CI low", format=".3f"),
                 alt.Tooltip("shown_high:Q", title="CI high", format=".3f"),
                 alt.Tooltip("p_fdr:Q", title="FDR p", format=".3f")])
    nullrule = alt.Chart(data(pd.DataFrame({"x": [null]}))).mark_rule(
        strokeDash=[5, 4], color=P.NEUTRAL).encode(x=alt.X("x:Q", scale=xs))
    return alt.layer(nullrule, rule, dot).properties(width=width, height=ROW_PX * len(df))


def _columns(sizes: list[int]) -> list[list[int]]:
    """Split panels (in order) into one or two columns of about equal height, so a long
    forest keeps a slide's landscape shape."""
    total = sum(sizes)
    if len(sizes) < 3 or total <= 10:
        return [list(range(len(sizes)))]
    run, cut = 0, len(sizes) - 1
    for i, n in enumerate(sizes):
        run += n + 2  # a panel's axis is worth about two rows
        if run >= (total + 2 * len(sizes)) / 2:
            cut = i + 1
            break
    cut = min(max(cut, 1), len(sizes) - 1)
    return [list(range(cut)), list(range(cut, len(sizes)))]


def forest(run: RunFiles, pal: Palette) -> Figure:
    comp = run.table("comparisons")
    all_effects = F.effects(comp)
    if not all_effects:
        raise Missing("models/comparisons.csv has no effect besides intercepts and variances")
    family = [e for e in all_effects if e.in_fdr_family]
    shown = F.ranked(family or all_effects)
    ref = run.reference_cohort
    q = float((run.config.get("models") or {}).get("fdr_q", 0.05))
    levels = {e.cohort_level() or dict(F.term_parts(e.term)).get("cohort") for e in shown} - {None}
    compact = len(levels) == 1  # one contrast: name it once, in the caption
    contrast = f"{next(iter(levels))} vs {ref}" if compact else ""
    labels = [f"{F.outcome_label(e.outcome)}: {e.short_term_label()}" if compact
              else e.label(ref) for e in shown]
    df = pd.DataFrame({
        "label": labels, "ratio": [e.ratio for e in shown],
        "unit": [e.unit for e in shown],
        "shown": [e.shown for e in shown], "shown_low": [e.shown_low for e in shown],
        "shown_high": [e.shown_high for e in shown], "p_fdr": [e.p_fdr for e in shown],
        "fdr": ["yes" if e.significant(q) else "no" for e in shown]})
    dup = df["label"].duplicated(keep=False)  # a label must be unique on its axis
    df.loc[dup, "label"] = [f"{lab} [{e.model}]" for lab, e, d in zip(df["label"], shown, dup)
                            if d]
    groups = list(dict.fromkeys(zip(df["ratio"], df["unit"])))
    groups.sort(key=lambda g: not g[0])  # ratios first
    subsets = [df[(df["ratio"] == r) & (df["unit"] == u)] for r, u in groups]
    columns = _columns([len(d) for d in subsets])
    width = P.WIDTH - 300 if len(columns) == 1 else 250
    panels = [_panel(d, r, u, width) for d, (r, u) in zip(subsets, groups)]
    stacks = [alt.vconcat(*[panels[i] for i in col], spacing=10) for col in columns]
    chart = (stacks[0] if len(stacks) == 1 else alt.hconcat(*stacks, spacing=30))
    chart = chart.resolve_scale(x="independent", fill="shared")
    k = sum(e.significant(q) for e in shown)
    top = F.strongest(shown)
    if family:
        finding = f"{k} of {len(shown)} tested model effects hold after FDR correction (q = {q:g})"
    else:
        finding = f"{len(shown)} model effects; none was adjusted for the false discovery rate"
    detail = f"smallest adjusted p: {top.claim(ref)} ({top.statistics()})"
    left = len(all_effects) - len(shown)
    caption = ((f"Cohort: {contrast}. " if compact else "") +
               "The model effects tested with false-discovery-rate control, with 95% confidence "
               "intervals; filled: significant after Benjamini–Hochberg correction. One axis per "
               "unit (ratios of log-scale models on a log axis); dashed: no effect."
               + (f" {left} further descriptive effects (outside the tested family) are in the "
                  "appendix table models/comparisons.csv." if left else ""))
    models = sorted({e.model for e in shown})
    method = (f"Estimates, intervals and p-values as written to models/comparisons.csv by the "
              f"models stage ({', '.join(models)}); {len(shown)} effects shown, intercepts and "
              f"variance components left out.")
    return Figure("effects", chart, finding, detail, caption, method, from_model=True)
