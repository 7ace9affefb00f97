"""Switch-locked arousal: the arousal trajectory around attention switches.

For each session, the arousal z-score is read from ``window_s`` seconds before to
``window_s`` seconds after every switch (an event-related average), and the same for
pseudo-switches placed at random in the session's coded multi-platform seconds, the
baseline that keeps what any moment of multi-platform viewing looks like apart from
what a switch looks like. Participants are then the unit: each participant's
trajectory pools their sessions, and the test asks whether the switch-minus-baseline
trajectory rises or falls over the ``pre_s`` seconds before a switch.

Per session (pure, cacheable)::

    switch_locked_session(timeline, switches, rng_seed, window_s, n_pseudo)

Per study::

    trajectories, test, lines = switch_locked_summary(per_session, roster)

``trajectories`` is written to metrics/switch_locked.csv.
"""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
from scipy import stats

SESSION_COLUMNS = ["kind", "lag_s", "n_events", "n_valid", "arousal_mean_z"]

TRAJECTORY_COLUMNS = ["level", "participant_id", "cohort", "lag_s", "arousal_switch_z",
                      "arousal_pseudo_z", "arousal_difference_z", "switch_ci_low",
                      "switch_ci_high", "baseline_ci_low", "baseline_ci_high",
                      "difference_ci_low", "difference_ci_high", "n_participants",
                      "n_switches", "n_switch_values", "n_pseudo_values"]

TEST_COLUMNS = ["scope", "cohort", "reference", "n_participants", "n_left_out",
                "slope_z_per_s", "ci_low", "ci_high", "change_z", "statistic", "df",
                "p_value", "wilcoxon_p", "direction", "note"]

METHOD_TEXT = ("switch-locked arousal: event-related average of the arousal z-score from "
               "{w} s before to {w} s after each switch, against pseudo-switches placed "
               "uniformly at random in coded multi-platform seconds (a permutation-style "
               "baseline); per participant, the least-squares slope of the switch minus "
               "pseudo-switch trajectory over the {pre} s before a switch, tested against "
               "zero with participants as the unit (one-sample t-test; Wilcoxon "
               "signed-rank test, Wilcoxon 1945, Biometrics Bull 1:80-83, as a check); "
               "pre-switch window after Yeykelis, Cummings & Reeves (2014), J Commun "
               "64:167-192")


def session_seed(participant_id: str, session_id: str, base: int = 0) -> int:
    """A stable seed for one session's pseudo-switches (same inputs, same seed)."""
    text = f"{base}:{participant_id}:{session_id}".encode()
    return int.from_bytes(hashlib.sha256(text).digest()[:8], "little")


def _locked(series: np.ndarray, first: int, events: np.ndarray, lags: np.ndarray
            ) -> np.ndarray:
    """Matrix (events x lags) of ``series`` values around each event; NaN off the end."""
    idx = events[:, None] + lags[None, :] - first
    inside = (idx >= 0) & (idx < len(series))
    return np.where(inside, series[np.clip(idx, 0, len(series) - 1)], np.nan)


def _average(kind: str, values: np.ndarray, lags: np.ndarray, n_events: int) -> pd.DataFrame:
    ok = np.isfinite(values)
    n_valid = ok.sum(axis=0) if n_events else np.zeros(len(lags), int)
    with np.errstate(invalid="ignore", divide="ignore"):
        total = np.where(ok, values, 0.0).sum(axis=0) if n_events else np.zeros(len(lags))
        mean = np.where(n_valid > 0, total / np.maximum(n_valid, 1), np.nan)
    return pd.DataFrame({"kind": kind, "lag_s": lags, "n_events": n_events,
                         "n_valid": n_valid.astype(int), "arousal_mean_z": mean})


def switch_locked_session(timeline: pd.DataFrame, switches: pd.DataFrame, rng_seed: int,
                          window_s: int = 60, n_pseudo: int = 200) -> pd.DataFrame:
    """Switch-locked and pseudo-switch-locked mean arousal of one session.

    Parameters
    ----------
    timeline : per-second rows with ``second``, ``state`` (none/single/multi, NA where
        uncoded), ``arousal`` (z, NaN where invalid) and ``coded``; ``participant_id``
        and ``session_id`` are carried into the result when present.
    switches : one row per switch, ``second`` = the switch moment (first second of the
        new bout).
    rng_seed : seed of the pseudo-switch placement (:func:`session_seed`).
    window_s : seconds either side of the event.
    n_pseudo : pseudo-switches, drawn with replacement from the coded multi seconds.

    Returns
    -------
    DataFrame, one row per kind (``switch``, ``pseudo``) and lag from -window_s to
    +window_s: n_events (events of that kind), n_valid (events with valid arousal at
    that lag), arousal_mean_z (their mean; NaN when none).

    References
    ----------
    Luck, S. J. (2014). An Introduction to the Event-Related Potential Technique, 2nd
    ed. MIT Press (event-locked averaging).
    Yeykelis, L., Cummings, J. J. & Reeves, B. (2014). Multitasking on a single device:
    arousal and the frequency, anticipation, and prediction of switching between media
    content on a computer. J Commun 64:167-192.
    """
    sec = timeline["second"].to_numpy(dtype=np.int64)
    lags = np.arange(-window_s, window_s + 1)
    if len(sec) == 0:
        out = pd.concat([_average(k, np.empty((0, len(lags))), lags, 0)
                         for k in ("switch", "pseudo")], ignore_index=True)
        return _carry(out, timeline)
    first = int(sec.min())
    series = np.full(int(sec.max()) - first + 1, np.nan)
    series[sec - first] = pd.to_numeric(timeline["arousal"], errors="coerce").to_numpy(float)

    events = pd.to_numeric(switches["second"], errors="coerce").dropna().to_numpy(np.int64) \
        if len(switches) else np.empty(0, np.int64)
    coded = timeline["coded"].fillna(False).astype(bool).to_numpy()
    multi = timeline["state"].to_numpy(dtype=object, na_value="") == "multi"
    pool = sec[coded & multi]
    rng = np.random.default_rng(rng_seed)
    pseudo = rng.choice(pool, size=n_pseudo, replace=True) if len(pool) else \
        np.empty(0, np.int64)

    out = pd.concat([
        _average("switch", _locked(series, first, events, lags), lags, len(events)),
        _average("pseudo", _locked(series, first, pseudo, lags), lags, len(pseudo)),
    ], ignore_index=True)
    return _carry(out, timeline)


def _carry(out: pd.DataFrame, timeline: pd.DataFrame) -> pd.DataFrame:
    front = []
    for col in ("participant_id", "session_id"):
        if col in timeline.columns and len(timeline):
            out.insert(len(front), col, str(timeline[col].iloc[0]))
            front.append(col)
    return out


# ----------------------------------------------------------------- per study
def _pool(per_session: pd.DataFrame) -> pd.DataFrame:
    """Participant x kind x lag means pooled over sessions (weighted by valid events)."""
    d = per_session.copy()
    d["total"] = np.where(d["n_valid"] > 0, d["arousal_mean_z"] * d["n_valid"], 0.0)
    g = d.groupby(["participant_id", "kind", "lag_s"], as_index=False)[
        ["total", "n_valid"]].sum()
    g["mean"] = np.where(g["n_valid"] > 0, g["total"] / g["n_valid"].clip(lower=1), np.nan)
    return g


def _slope(lags: np.ndarray, y: np.ndarray) -> float:
    ok = np.isfinite(y)
    if ok.sum() < 3:
        return np.nan
    return float(np.polyfit(lags[ok], y[ok], 1)[0])


def _one_sample(slopes: np.ndarray, confidence: float) -> dict:
    n = len(slopes)
    if n < 2:
        return {"slope_z_per_s": float(slopes.mean()) if n else np.nan, "ci_low": np.nan,
                "ci_high": np.nan, "statistic": np.nan, "df": np.nan, "p_value": np.nan,
                "wilcoxon_p": np.nan}
    m, se = slopes.mean(), slopes.std(ddof=1) / np.sqrt(n)
    crit = stats.t.ppf(0.5 + confidence / 2, n - 1)
    t = stats.ttest_1samp(slopes, 0.0)
    try:
        w = float(stats.wilcoxon(slopes).pvalue) if np.any(slopes != 0) else np.nan
    except ValueError:
        w = np.nan
    return {"slope_z_per_s": m, "ci_low": m - crit * se, "ci_high": m + crit * se,
            "statistic": float(t.statistic), "df": float(n - 1), "p_value": float(t.pvalue),
            "wilcoxon_p": w}


def _direction(row: dict, alpha: float) -> str:
    p = row.get("p_value", np.nan)
    if not np.isfinite(p) or p >= alpha:
        return "no clear change"
    return "rises" if row["slope_z_per_s"] > 0 else "falls"


def switch_locked_summary(per_session: pd.DataFrame, roster: pd.DataFrame, *,
                          pre_s: int = 12, min_events: int = 5, confidence: float = 0.95,
                          reference: str | None = None
                          ) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Participant and cohort trajectories and the pre-switch test.

    Parameters
    ----------
    per_session : rows of :func:`switch_locked_session` for every session, with
        participant_id (and session_id).
    roster : participant_id, cohort.
    pre_s : the test's window: lags -pre_s .. 0.
    min_events : participants with fewer switches with valid arousal at the switch
        moment are left out of the test (and counted).
    confidence : coverage of the intervals; the test's level is 1 - confidence.
    reference : reference cohort for the between-cohort rows (default: first sorted).

    Returns
    -------
    (trajectories, test, lines): trajectories with :data:`TRAJECTORY_COLUMNS` (level
    ``participant``: one participant's switch-locked, pseudo-switch (baseline) and
    difference trajectories pooled over their sessions; level ``cohort``: their means
    across the cohort's participants with Student-t intervals), the test with :data:`TEST_COLUMNS` (scope ``all``,
    one row per cohort, one per cohort against the reference), readable lines.

    References
    ----------
    Student (1908). The probable error of a mean. Biometrika 6:1-25.
    Welch, B. L. (1947). The generalization of "Student's" problem when several
    different population variances are involved. Biometrika 34:28-35.
    Wilcoxon, F. (1945). Individual comparisons by ranking methods. Biometrics Bull
    1:80-83.
    """
    alpha = 1 - confidence
    lines: list[str] = []
    if per_session is None or per_session.empty:
        lines.append("switch-locked arousal: no sessions with switch-locked values")
        return (pd.DataFrame(columns=TRAJECTORY_COLUMNS), pd.DataFrame(columns=TEST_COLUMNS),
                lines)
    d = per_session.copy()
    d["participant_id"] = d["participant_id"].astype(str)
    cohort_of = roster.assign(participant_id=roster["participant_id"].astype(str)) \
        .set_index("participant_id")["cohort"].astype(str)
    pooled = _pool(d)
    wide = pooled.pivot_table(index=["participant_id", "lag_s"], columns="kind",
                              values=["mean", "n_valid"], aggfunc="first")
    part = pd.DataFrame({
        "participant_id": wide.index.get_level_values(0),
        "lag_s": wide.index.get_level_values(1),
        "arousal_switch_z": wide.get(("mean", "switch"), pd.Series(np.nan, wide.index)).to_numpy(),
        "arousal_pseudo_z": wide.get(("mean", "pseudo"), pd.Series(np.nan, wide.index)).to_numpy(),
        "n_switch_values": wide.get(("n_valid", "switch"),
                                    pd.Series(0, wide.index)).fillna(0).to_numpy(int),
        "n_pseudo_values": wide.get(("n_valid", "pseudo"),
                                    pd.Series(0, wide.index)).fillna(0).to_numpy(int),
    })
    part["arousal_difference_z"] = part["arousal_switch_z"] - part["arousal_pseudo_z"]
    part["cohort"] = part["participant_id"].map(cohort_of)
    n_sw = d[d["kind"] == "switch"].groupby(["participant_id", "session_id"]
                                            if "session_id" in d.columns else
                                            ["participant_id"])["n_events"].first() \
        .groupby(level=0).sum()
    part["n_switches"] = part["participant_id"].map(n_sw).fillna(0).astype(int)
    part["level"] = "participant"
    part["n_participants"] = 1
    part["difference_ci_low"] = np.nan
    part["difference_ci_high"] = np.nan
    missing = sorted(part.loc[part["cohort"].isna(), "participant_id"].unique())
    if missing:
        lines.append(f"switch-locked arousal: participant(s) {', '.join(missing)} not in "
                     "the roster left out")
        part = part[part["cohort"].notna()]

    # cohort trajectories: participants as the unit (Student-t intervals across them)
    for col in ("switch_ci_low", "switch_ci_high", "baseline_ci_low", "baseline_ci_high"):
        part[col] = np.nan

    t_crit: dict[int, float] = {}  # Student-t quantile by degrees of freedom

    def mean_ci(values: np.ndarray) -> tuple[float, float, float, int]:
        v = values[np.isfinite(values)]
        n = len(v)
        if n == 0:
            return np.nan, np.nan, np.nan, 0
        if n < 2:
            return float(v.mean()), np.nan, np.nan, n
        if n - 1 not in t_crit:
            t_crit[n - 1] = stats.t.ppf(0.5 + confidence / 2, n - 1)
        half = t_crit[n - 1] * v.std(ddof=1) / np.sqrt(n)
        return float(v.mean()), float(v.mean() - half), float(v.mean() + half), n

    crit_rows = []
    values = {col: part[col].to_numpy(float) for col in
              ("arousal_switch_z", "arousal_pseudo_z", "arousal_difference_z",
               "n_switches", "n_switch_values", "n_pseudo_values")}
    for (cohort, lag), rows_at in sorted(part.groupby(["cohort", "lag_s"]).indices.items()):
        sw, sw_lo, sw_hi, _ = mean_ci(values["arousal_switch_z"][rows_at])
        ps, ps_lo, ps_hi, _ = mean_ci(values["arousal_pseudo_z"][rows_at])
        df_, df_lo, df_hi, n = mean_ci(values["arousal_difference_z"][rows_at])
        crit_rows.append({
            "level": "cohort", "participant_id": pd.NA, "cohort": cohort, "lag_s": lag,
            "arousal_switch_z": sw, "arousal_pseudo_z": ps, "arousal_difference_z": df_,
            "switch_ci_low": sw_lo, "switch_ci_high": sw_hi, "baseline_ci_low": ps_lo,
            "baseline_ci_high": ps_hi, "difference_ci_low": df_lo, "difference_ci_high": df_hi,
            "n_participants": n, "n_switches": int(values["n_switches"][rows_at].sum()),
            "n_switch_values": int(values["n_switch_values"][rows_at].sum()),
            "n_pseudo_values": int(values["n_pseudo_values"][rows_at].sum())})
    cohort_traj = pd.DataFrame(crit_rows, columns=TRAJECTORY_COLUMNS)
    trajectories = pd.concat([part[TRAJECTORY_COLUMNS], cohort_traj], ignore_index=True)

    # the test: per-participant slope of the difference over -pre_s .. 0
    win = part[(part["lag_s"] >= -pre_s) & (part["lag_s"] <= 0)]
    at_zero = part[part["lag_s"] == 0].set_index("participant_id")["n_switch_values"]
    slopes = win.groupby("participant_id").apply(
        lambda g: _slope(g["lag_s"].to_numpy(float), g["arousal_difference_z"].to_numpy()),
        include_groups=False)
    enough = at_zero.reindex(slopes.index).fillna(0) >= min_events
    usable = slopes[enough & slopes.notna()]
    left_out = int(len(slopes) - len(usable))
    cohorts = sorted(part["cohort"].unique())
    ref = reference if reference in cohorts else (cohorts[0] if cohorts else None)
    rows = []

    def scope_row(scope: str, cohort: str | None, ids: pd.Index) -> dict:
        s = usable[usable.index.isin(ids)].to_numpy(float)
        n_all = int(slopes.index.isin(ids).sum())
        r = {"scope": scope, "cohort": cohort, "reference": None, "n_participants": len(s),
             "n_left_out": n_all - len(s), **_one_sample(s, confidence)}
        r["change_z"] = r["slope_z_per_s"] * pre_s
        r["direction"] = _direction(r, alpha)
        r["note"] = "" if len(s) >= 2 else "not tested: fewer than two participants with " \
            f"at least {min_events} switches with valid arousal"
        return r

    ids_by_cohort = part.groupby("cohort")["participant_id"].unique()
    rows.append(scope_row("all", None, pd.Index(part["participant_id"].unique())))
    for c in cohorts:
        rows.append(scope_row("cohort", c, pd.Index(ids_by_cohort[c])))
    for c in cohorts:
        if c == ref:
            continue
        x = usable[usable.index.isin(ids_by_cohort[c])].to_numpy(float)
        y = usable[usable.index.isin(ids_by_cohort[ref])].to_numpy(float)
        r = {"scope": "cohort_difference", "cohort": c, "reference": ref,
             "n_participants": len(x) + len(y), "n_left_out": 0, "wilcoxon_p": np.nan}
        if len(x) >= 2 and len(y) >= 2:
            w = stats.ttest_ind(x, y, equal_var=False)
            diff = x.mean() - y.mean()
            vx, vy = x.var(ddof=1) / len(x), y.var(ddof=1) / len(y)
            dfw = (vx + vy) ** 2 / (vx ** 2 / (len(x) - 1) + vy ** 2 / (len(y) - 1))
            half = stats.t.ppf(0.5 + confidence / 2, dfw) * np.sqrt(vx + vy)
            r.update(slope_z_per_s=diff, ci_low=diff - half, ci_high=diff + half,
                     statistic=float(w.statistic), df=float(dfw), p_value=float(w.pvalue),
                     note="Welch t-test of participant slopes")
        else:
            r.update(slope_z_per_s=np.nan, ci_low=np.nan, ci_high=np.nan, statistic=np.nan,
                     df=np.nan, p_value=np.nan, note="not tested: fewer than two participants "
                     "in a cohort")
        r["change_z"] = r["slope_z_per_s"] * pre_s
        p = r["p_value"]
        r["direction"] = "no clear difference" if not np.isfinite(p) or p >= alpha else (
            "steeper rise" if r["slope_z_per_s"] > 0 else "steeper fall")
        rows.append(r)
    test = pd.DataFrame(rows, columns=TEST_COLUMNS)

    if left_out:
        lines.append(f"switch-locked arousal: {left_out} participant(s) with fewer than "
                     f"{min_events} switches with valid arousal left out of the test")
    pct = f"{confidence * 100:g}% CI"
    for _, r in test.iterrows():
        who = ("all participants" if r["scope"] == "all" else
               f"cohort {r['cohort']}" if r["scope"] == "cohort" else
               f"cohort {r['cohort']} vs {r['reference']}")
        if not np.isfinite(r["p_value"]):
            lines.append(f"switch-locked arousal, {who}: {r['note']}")
            continue
        if r["scope"] == "cohort_difference":
            verdict = ("the pre-switch slope does not clearly differ"
                       if r["direction"] == "no clear difference"
                       else f"arousal shows a {r['direction']} before switches")
        else:
            verdict = ("arousal shows no clear change" if r["direction"] == "no clear change"
                       else f"arousal {r['direction']}")
        lines.append(
            f"switch-locked arousal, {who} ({int(r['n_participants'])} participants): over the "
            f"{pre_s} s before a switch, relative to pseudo-switches, {verdict}: "
            f"slope {r['slope_z_per_s']:+.4f} z/s ({pct} "
            f"{r['ci_low']:+.4f} to {r['ci_high']:+.4f}), change {r['change_z']:+.3f} z, "
            f"p = {r['p_value']:.3g}"
            + (f", Wilcoxon p = {r['wilcoxon_p']:.3g}" if np.isfinite(r["wilcoxon_p"]) else ""))
    return trajectories, test, lines


def switch_locked_methods(window_s: int = 60, pre_s: int = 12) -> dict[str, str]:
    """Method text (with references) for the report's methods section."""
    return {"switch_locked": METHOD_TEXT.format(w=window_s, pre=pre_s)}
