"""(a) One session's timeline: arousal above, one lane per platform below."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from pipeline.errors import ConfigError
from pipeline.report import numbers as fmt
from pipeline.report import palette as P
from pipeline.report.charts._common import Figure, Missing, data, session_label
from pipeline.report.palette import Palette
from pipeline.report.run_files import RunFiles

#: Most points drawn in the arousal trace; longer sessions are averaged into bins.
MAX_TRACE_POINTS = 4000
LANE_PX = 38


def runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start (inclusive) and end (exclusive) index of each run of True in ``mask``."""
    m = np.concatenate([[0], np.asarray(mask, dtype=np.int8), [0]])
    d = np.diff(m)
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1)


def choose_session(sessions: pd.DataFrame, available: set[str],
                   wanted: str | None = None) -> tuple[str, str, str]:
    """The session to draw: ``wanted`` ('participant/session'), else a typical one.

    Typical: the session whose switch rate is closest to the median of the sessions
    with a rate (ties: the first in sorted order); without rates, the one with the
    most multi-platform time. Returns (participant_id, session_id, why).
    """
    s = sessions.assign(stem=sessions["participant_id"] + "__" + sessions["session_id"])
    s = s[s["stem"].isin(available)].sort_values(["participant_id", "session_id"])
    if wanted is not None:
        pid, _, sid = wanted.partition("/")
        hit = s[(s["participant_id"] == pid) & (s["session_id"] == sid)]
        if hit.empty:
            choices = ", ".join((s["participant_id"] + "/" + s["session_id"]).head(8))
            raise ConfigError(f"session {wanted!r} has no timeline in this run",
                              hint=f"give participant/session, e.g. {choices}")
        return pid, sid, "chosen by the user"
    if s.empty:
        raise Missing("no session in metrics/sessions.csv has a timeline file")
    rate = pd.to_numeric(s["switches_per_hour"], errors="coerce")
    if rate.notna().any():
        med = float(rate.median())
        dist = (rate - med).abs()
        row = s.loc[dist.idxmin()]
        why = (f"the session whose switch rate is closest to the median "
               f"({fmt.auto(med)} per multi-platform hour) of {int(rate.notna().sum())} sessions")
    else:
        row = s.loc[pd.to_numeric(s["multi_hours"], errors="coerce").fillna(-1).idxmax()]
        why = "the session with the most multi-platform time (no session has a switch rate)"
    return str(row["participant_id"]), str(row["session_id"]), why


def _full_seconds(tl: pd.DataFrame) -> pd.DataFrame:
    """One row per second 0..last; rows the timeline lacks count as uncoded."""
    tl = tl.sort_values("second").drop_duplicates("second")
    sec = tl["second"].astype(int).to_numpy()
    full = np.arange(0, (sec.max() + 1) if sec.size else 0)
    tl = tl.set_index(tl["second"].astype(int)).reindex(full)
    tl["second"] = full
    tl["coded"] = tl["coded"].astype("boolean").fillna(False).astype(bool)
    return tl.reset_index(drop=True)


def lane_table(tl: pd.DataFrame, pal: Palette) -> tuple[pd.DataFrame, list[str]]:
    """Rectangles of the lanes: platform, in view / attended, start and end minute."""
    coded = tl["coded"].to_numpy(bool)
    in_view = tl["in_view"].astype("string").fillna("").where(coded, "")
    attended = tl["attended"].astype("string").fillna("").where(coded, "").to_numpy(str)
    dummies = in_view.str.get_dummies(sep=";") if len(in_view) else pd.DataFrame()
    present = set(dummies.columns) | (set(np.unique(attended)) - {""})
    codes = [c for c in pal.platforms if c in present]
    frames = []
    for code in codes:
        masks = {"in view": dummies[code].to_numpy(bool) if code in dummies
                 else np.zeros(len(tl), bool),
                 "attended": attended == code}
        for kind, mask in masks.items():
            start, end = runs(mask)
            frames.append(pd.DataFrame({"lane": pal.label(code), "kind": kind,
                                        "start_min": start / 60.0, "end_min": end / 60.0}))
    start, end = runs(~coded)
    lanes = [pal.label(c) for c in codes]
    if start.size:
        frames.append(pd.DataFrame({"lane": "uncoded", "kind": "uncoded",
                                    "start_min": start / 60.0, "end_min": end / 60.0}))
        lanes.append("uncoded")
    cols = ["lane", "kind", "start_min", "end_min"]
    return (pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)), lanes


def arousal_trace(tl: pd.DataFrame) -> tuple[pd.DataFrame, int]:
    """(minute, arousal) per second, or bin means when the session is long; bin size."""
    a = pd.to_numeric(tl["arousal"], errors="coerce").to_numpy(float)
    n = a.size
    step = max(1, int(np.ceil(n / MAX_TRACE_POINTS)))
    if step > 1:
        pad = (-n) % step
        blocks = np.concatenate([a, np.full(pad, np.nan)]).reshape(-1, step)
        ok = np.isfinite(blocks)
        cnt = ok.sum(axis=1)
        a = np.where(cnt > 0, np.where(ok, blocks, 0).sum(axis=1) / np.maximum(cnt, 1), np.nan)
        minute = (np.arange(a.size) * step + step / 2) / 60.0
    else:
        minute = np.arange(n) / 60.0
    return pd.DataFrame({"minute": minute, "arousal": a}), step


def session_timeline(run: RunFiles, pal: Palette, session: str | None = None) -> Figure:
    sessions = run.table("sessions")
    if not run.timeline_files:
        raise Missing("timeline/ holds no per-session Parquet files")
    pid, sid, why = choose_session(sessions, set(run.timeline_files), session)
    tl = run.timeline(f"{pid}__{sid}")
    need = [c for c in ("second", "coded", "in_view", "attended") if c not in tl]
    if need:
        raise Missing(f"timeline/{pid}__{sid}.parquet has no column {', '.join(need)}")
    tl = _full_seconds(tl)
    if "arousal" not in tl.columns:
        tl["arousal"] = np.nan
    has_arousal = bool(pd.to_numeric(tl["arousal"], errors="coerce").notna().any())
    duration_min = len(tl) / 60.0
    rects, lanes = lane_table(tl, pal)
    trace, step = arousal_trace(tl)

    x = alt.X("start_min:Q", title="minutes from session start",
              scale=alt.Scale(domain=[0, duration_min], nice=False))
    y = alt.Y("lane:N", title=None, sort=lanes, scale=alt.Scale(domain=lanes),
              axis=alt.Axis(labelFontSize=P.FONT_SIZE["label"], ticks=False, domain=False))
    colour = alt.Color("lane:N", scale=alt.Scale(**pal.platform_scale()), legend=None)
    base = alt.Chart(data(rects)).encode(x=x, x2="end_min:Q", y=y)
    in_view = base.transform_filter(alt.datum.kind == "in view").mark_bar(
        height={"band": 0.86}, opacity=0.32).encode(color=colour)
    attended = base.transform_filter(alt.datum.kind == "attended").mark_bar(
        height={"band": 0.5}).encode(color=colour)
    uncoded = base.transform_filter(alt.datum.kind == "uncoded").mark_bar(
        height={"band": 0.86}, color=P.UNCODED)
    lanes_chart = alt.layer(in_view, attended, uncoded).properties(
        width=P.WIDTH, height=max(LANE_PX * len(lanes), 80))

    valid = (pd.to_numeric(tl["arousal"], errors="coerce").notna()).to_numpy()
    gap_s, gap_e = runs(~valid)
    gaps = pd.DataFrame({"start_min": gap_s / 60.0, "end_min": gap_e / 60.0})
    gap_layer = alt.Chart(data(gaps)).mark_rect(color=P.BAND, opacity=0.6).encode(
        x=alt.X("start_min:Q", scale=alt.Scale(domain=[0, duration_min], nice=False),
                title=None, axis=alt.Axis(labels=False, ticks=False)),
        x2="end_min:Q")
    line = alt.Chart(data(trace)).mark_line(
        color=P.NEUTRAL, strokeWidth=1.4, invalid="break-paths-filter-domains").encode(
        x=alt.X("minute:Q", scale=alt.Scale(domain=[0, duration_min], nice=False),
                title=None, axis=alt.Axis(labels=False, ticks=False)),
        y=alt.Y("arousal:Q", title="arousal (z)"))
    arousal_chart = alt.layer(gap_layer, line).properties(width=P.WIDTH, height=150)
    chart = (alt.vconcat(arousal_chart, lanes_chart, spacing=6).resolve_scale(x="shared")
             if has_arousal else lanes_chart)

    row = sessions[(sessions["participant_id"] == pid) & (sessions["session_id"] == sid)].iloc[0]
    coded_h = float(row["coded_hours"])
    multi_share = float(row["multi_hours"]) / coded_h if coded_h > 0 else float("nan")
    label = session_label(pid, sid)
    rate = row["switches_per_hour"]
    rate_text = (f" ({fmt.auto(rate)} per multi-platform hour)" if fmt.is_num(rate) else "")
    finding = (f"Session {label}: several platforms in view {fmt.pct(multi_share)} of coded "
               f"time, {fmt.count(row['switches'])} switches{rate_text}")
    detail = (f"participant {pid} ({row['cohort']}), session {sid}: {fmt.auto(coded_h * 60)} "
              f"of {fmt.auto(duration_min)} minutes coded")
    caption = ("One lane per platform, shaded where the platform is in view and solid where it "
               "is attended; grey lane: uncoded seconds. "
               + ("Above: arousal on the same time axis; grey bands: no valid skin conductance."
                  if has_arousal else "No arousal trace: this session has no valid skin "
                  "conductance."))
    source = (run.config.get("arousal") or {}).get("source", "eda")
    trace_note = (f" The arousal trace is drawn as {step}-second means." if step > 1 else "")
    method = (f"Per-second timeline of session {label}, {why}. Arousal is the "
              f"within-participant z-score of the 1 Hz {'phasic component' if source == 'phasic' else 'cleaned skin conductance'} "
              f"(study data contract §2).{trace_note}")
    return Figure("timeline", chart, finding, detail, caption, method)
