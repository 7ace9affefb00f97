"""(h) Data-quality overview: coverage, valid signal and sync residual per session."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, session_label
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

COVERAGE = ("coverage", "coverage_share", "coded_share", "coded_fraction")
VALID = ("eda_valid_fraction", "valid_share", "signal_valid_share")
INVALID = ("invalid_share_total", "invalid_share", "invalid_signal_share", "eda_invalid_share")
RESIDUAL = ("sync_residual_s", "sync_residual", "residual_s", "sync_rmse_s")


def _first(df: pd.DataFrame, names) -> str | None:
    return next((c for c in names if c in df.columns), None)


def flagged_sessions(qc: pd.DataFrame) -> pd.Series:
    """True where QC marks a session unusable (an explicit column, else any flag)."""
    for col, bad_when in (("usable", False), ("excluded", True), ("flagged", True),
                          ("exclude", True)):
        if col in qc.columns:
            v = qc[col].astype("boolean").fillna(not bad_when).astype(bool)
            return v == bad_when
    if "flags" in qc.columns:
        return qc["flags"].fillna("").astype(str).str.strip() != ""
    raise Missing("qc/sessions.csv has no 'usable' or 'flags' column")


def quality_table(run: RunFiles) -> pd.DataFrame:
    qc = run.table("qc", ["participant_id", "session_id"])
    sess = run.table("sessions")
    t = qc.merge(sess, on=["participant_id", "session_id"], how="left", suffixes=("", "_m"))
    out = pd.DataFrame({"participant_id": t["participant_id"], "session_id": t["session_id"]})
    out["session"] = [session_label(p, s) for p, s in zip(t["participant_id"], t["session_id"])]
    cov = _first(t, COVERAGE)
    out["coverage"] = pd.to_numeric(t[cov], errors="coerce") if cov else np.nan
    val = _first(t, VALID)
    inv = _first(t, INVALID)
    if val:
        out["valid"] = pd.to_numeric(t[val], errors="coerce")
    elif inv:
        out["valid"] = 1.0 - pd.to_numeric(t[inv], errors="coerce")
    else:
        out["valid"] = np.nan
    res = _first(t, RESIDUAL)
    out["residual_s"] = pd.to_numeric(t[res], errors="coerce") if res else np.nan
    out["flagged"] = flagged_sessions(qc).to_numpy()
    out["flags"] = (qc["flags"].fillna("").astype(str) if "flags" in qc.columns else "")
    return out.sort_values(["participant_id", "session_id"]).reset_index(drop=True)


def quality(run: RunFiles, pal: Palette) -> Figure:
    q = quality_table(run)
    panels_spec = [("coverage", "coded share of session", True),
                   ("valid", "valid skin conductance share", True),
                   ("residual_s", "sync residual (s)", False)]
    panels_spec = [p for p in panels_spec if q[p[0]].notna().any()]
    if not panels_spec:
        raise Missing("qc/sessions.csv has no coverage, valid-signal or sync-residual column")
    q["status"] = np.where(q["flagged"], "flagged", "usable")
    order = list(q["session"])
    height = max((22 if len(q) <= 24 else 14) * len(q), 120)
    y = alt.Y("session:N", sort=order, title=None,
              axis=alt.Axis(labelFontSize=12 if len(q) > 24 else 15))
    panels = []
    for i, (col, title, share) in enumerate(panels_spec):
        xs = alt.Scale(domain=[0, 1]) if share else alt.Scale(zero=True)
        enc = dict(x=alt.X(f"{col}:Q", title=title, scale=xs,
                           axis=alt.Axis(format="%" if share else "~g", tickCount=4)),
                   y=y if i == 0 else y.axis(None))
        bars = alt.Chart(data(q)).mark_rule(color=P.BAND, strokeWidth=3).encode(
            x=alt.X("zero:Q", scale=xs), x2=f"{col}:Q", y=enc["y"]).transform_calculate(zero="0")
        dots = alt.Chart(data(q)).mark_point(size=90, strokeWidth=1.8).encode(
            **enc,
            shape=alt.Shape("status:N", scale=alt.Scale(domain=["usable", "flagged"],
                                                        range=["circle", "triangle-down"]),
                            title="QC"),
            fill=alt.Fill("status:N", scale=alt.Scale(domain=["usable", "flagged"],
                                                      range=["#FFFFFF", P.ESTIMATE_COLOUR]),
                          title="QC"),
            color=alt.value(P.ESTIMATE_COLOUR),
            tooltip=[alt.Tooltip("session:N"), alt.Tooltip(f"{col}:Q", format=".3f"),
                     alt.Tooltip("flags:N")])
        panels.append(alt.layer(bars, dots).properties(width=220, height=height))
    chart = alt.hconcat(*panels, spacing=18)
    n, bad = len(q), int(q["flagged"].sum())
    bits = [f"{n - bad} of {n} sessions pass quality control"]
    if q["coverage"].notna().any():
        bits.append(f"median coverage {fmt.pct(q['coverage'].median())}")
    if q["valid"].notna().any():
        bits.append(f"median valid signal {fmt.pct(q['valid'].median())}")
    finding = "; ".join(bits)
    flags = (q.loc[q["flags"] != "", "flags"].str.split(r"[;,|]\s*", regex=True).explode()
             .str.strip())
    flags = flags[flags != ""].value_counts()
    detail = ("flags: " + ", ".join(f"{k} ({v})" for k, v in flags.items())) if len(flags) \
        else "no session flagged"
    caption = ("One row per session: share of the session's seconds that are coded, share of "
               "coded seconds with valid skin conductance, and the residual of the sync "
               "mapping. Filled triangles: sessions flagged by quality control.")
    qc_cfg = run.config.get("qc") or {}
    method = (f"From qc/sessions.csv and metrics/sessions.csv ({n} sessions). A session is "
              f"flagged when less than {fmt.pct(qc_cfg.get('min_usable_share', 0.5))} of its "
              f"coded seconds have valid signal, among other checks; flagged sessions are "
              f"{'left out of' if qc_cfg.get('exclude_flagged_from_models', True) else 'kept in'} "
              f"the models. {detail}.")
    return Figure("quality", chart, finding, detail, caption, method)
