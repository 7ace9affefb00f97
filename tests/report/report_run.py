"""A small hand-made run folder (CONTRACT §3) for the report tests.

The tables are invented for the tests only: two cohorts of three participants with two
sessions each, three platforms, one of them with a hostile code, and a hostile study
name, so every test also exercises escaping.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd

HOSTILE_STUDY = '<script>alert(1)</script> & "Living-room study"'
HOSTILE_CODE = "<img src=x onerror=alert(2)>"
PLATFORMS = {"tv": "screen", "phone": "screen", HOSTILE_CODE: "print"}
COHORTS = {"adult": ["p01", "p02", "p03"], "teen": ["p04", "p05", "p06"]}
SESSIONS = ("s1", "s2")
SECONDS = 1500


def _segments(rng: np.random.Generator, n: int, choices: list[str], mean_len: float):
    """Piecewise-constant labels: random lengths, random choice per segment."""
    lengths = rng.geometric(1 / mean_len, size=n)  # at least n segments of >= 1 s
    labels = rng.choice(choices, size=lengths.size)
    out = np.repeat(labels, lengths)[:n]
    return out


def make_timeline(rng, pid: str, sid: str) -> pd.DataFrame:
    views = ["", "tv", "phone", "tv;phone", f"{HOSTILE_CODE};tv", HOSTILE_CODE,
             f"{HOSTILE_CODE};phone;tv"]
    in_view = _segments(rng, SECONDS, views, 40)
    # attended: one of in view (first listed or random), sometimes none
    pick = _segments(rng, SECONDS, [0, 1, 2], 9).astype(int)
    split = pd.Series(in_view).str.split(";")
    attended = np.array([p[k % len(p)] if p != [""] else "" for p, k in zip(split, pick)],
                        dtype=object)
    attended[rng.random(SECONDS) < 0.05] = ""
    coded = np.ones(SECONDS, bool)
    coded[600:660] = False  # an uncoded gap
    in_view_s = pd.array(np.where(coded, in_view, None), dtype="string")
    attended_s = pd.array(np.where(coded, attended, None), dtype="string")
    n_view = np.where(in_view == "", 0, pd.Series(in_view).str.count(";") + 1)
    state = np.select([n_view == 0, n_view == 1], ["none", "single"], "multi")
    t = np.arange(SECONDS)
    eda = 5 + 0.5 * np.sin(t / 90) + rng.normal(0, 0.05, SECONDS)
    valid = np.ones(SECONDS, bool)
    valid[1000:1040] = False
    arousal = (eda - eda.mean()) / eda.std()
    arousal[~valid] = np.nan
    return pd.DataFrame({
        "participant_id": pid, "session_id": sid, "second": t, "coded": coded,
        "in_view": in_view_s, "attended": attended_s,
        "n_in_view": pd.array(np.where(coded, n_view, None), dtype="Int64"),
        "state": pd.array(np.where(coded, state, None), dtype="string"),
        "fine_state": pd.array(np.where(coded, pd.Series(in_view).str.replace(";", "+")
                                        .replace("", "none"), None), dtype="string"),
        "sensor_s": t.astype(float), "eda_us": eda, "eda_tonic_us": eda - 0.1,
        "eda_phasic_us": np.full(SECONDS, 0.1), "scr_onsets": 0, "scr_amplitude_sum_us": 0.0,
        "hr_bpm": np.full(SECONDS, 70.0), "motion_g": np.full(SECONDS, 0.01),
        "signal_valid": valid, "hr_valid": valid, "arousal": arousal,
    })


def _runs_of(values: np.ndarray):
    change = np.flatnonzero(np.r_[True, values[1:] != values[:-1]])
    ends = np.r_[change[1:], values.size]
    return change, ends


def write_run(out: Path, *, hostile: bool = True, optional: bool = True) -> Path:
    rng = np.random.default_rng(7)
    out.mkdir(parents=True, exist_ok=True)
    for sub in ("metrics", "models", "qc", "timeline", "agreement", "power"):
        (out / sub).mkdir(exist_ok=True)
    sess_rows, state_rows, plat_rows, bout_rows, sw_rows, qc_rows, lock_rows = ([] for _ in range(7))
    for cohort, pids in COHORTS.items():
        for pid in pids:
            for sid in SESSIONS:
                tl = make_timeline(rng, pid, sid)
                tl.to_parquet(out / "timeline" / f"{pid}__{sid}.parquet")
                coded = tl["coded"].to_numpy()
                att = tl["attended"].fillna("").to_numpy(str)
                starts, ends = _runs_of(np.where(coded, att, "\0"))
                bouts = [(s, e, att[s]) for s, e in zip(starts, ends) if coded[s] and att[s]]
                switches = sum(1 for a, b in zip(bouts, bouts[1:]) if a[2] != b[2])
                multi_s = int((tl["state"] == "multi").sum())
                coded_s = int(coded.sum())
                boost = 1.4 if cohort == "teen" else 1.0
                sess_rows.append({
                    "participant_id": pid, "session_id": sid, "cohort": cohort,
                    "coded_hours": coded_s / 3600, "media_hours": (tl["n_in_view"] > 0).sum() / 3600,
                    "multi_hours": multi_s / 3600, "switches": switches,
                    "switches_per_hour": switches / (multi_s / 3600) * boost,
                    "eda_valid_fraction": float(tl["signal_valid"][coded].mean()),
                    "compression_ratio": 0.8 + 0.1 * rng.random()})
                for state in ("none", "single", "multi"):
                    a = tl.loc[tl["state"] == state, "arousal"].dropna()
                    p05, p95 = np.percentile(a, [5, 95])
                    state_rows.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                                       "state": state, "seconds": len(a), "arousal_mean": a.mean(),
                                       "arousal_p05": p05, "arousal_p95": p95,
                                       "arousal_range": p95 - p05, "scr_per_min": 2.0})
                for code, group in PLATFORMS.items():
                    in_view = tl["in_view"].fillna("").str.split(";").apply(lambda c: code in c)
                    mine = [e - s for s, e, c in bouts if c == code]
                    plat_rows.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                                      "platform": code, "group": group,
                                      "in_view_seconds": int(in_view.sum()),
                                      "attended_seconds": int((att == code).sum()),
                                      "bouts": len(mine),
                                      "dwell_median_s": float(np.median(mine)) if mine else np.nan})
                for i, (s, e, c) in enumerate(bouts):
                    edge = s == 0 or e == SECONDS or not coded[max(s - 1, 0)] or \
                        (e < SECONDS and not coded[e])
                    bout_rows.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                                      "platform": c, "start_s": int(s), "duration_s": int(e - s),
                                      "censored": bool(edge)})
                for a, b in zip(bouts, bouts[1:]):
                    if a[2] != b[2]:
                        sw_rows.append({"participant_id": pid, "session_id": sid,
                                        "cohort": cohort, "second": int(b[0]),
                                        "from_platform": a[2], "to_platform": b[2]})
                flagged = pid == "p03" and sid == "s2"
                qc_rows.append({"participant_id": pid, "session_id": sid,
                                "coverage": coded_s / SECONDS, "sync_residual_s": 0.1 * rng.random(),
                                "invalid_share": 1 - float(tl["signal_valid"].mean()),
                                "usable": not flagged,
                                "flags": "low_valid_signal" if flagged else ""})
            for lag in range(-20, 21):
                bump = 0.4 * np.exp(-((lag - 1) ** 2) / 8)
                lock_rows.append({"level": "participant", "participant_id": pid,
                                  "cohort": cohort, "lag_s": lag,
                                  "arousal_switch_z": bump + rng.normal(0, 0.05),
                                  "arousal_pseudo_z": rng.normal(0, 0.05),
                                  "n_participants": 1, "n_switches": 40})
    pd.DataFrame(sess_rows).to_csv(out / "metrics/sessions.csv", index=False)
    pd.DataFrame(state_rows).to_csv(out / "metrics/states.csv", index=False)
    plat = pd.DataFrame(plat_rows)
    plat.to_csv(out / "metrics/platforms.csv", index=False)
    plat.groupby(["participant_id", "session_id", "cohort", "group"], as_index=False)[
        ["in_view_seconds", "attended_seconds"]].sum().to_csv(out / "metrics/groups.csv", index=False)
    pd.DataFrame(bout_rows).to_csv(out / "metrics/bouts.csv", index=False)
    pd.DataFrame(sw_rows).to_csv(out / "metrics/switches.csv", index=False)
    pd.DataFrame(qc_rows).to_csv(out / "qc/sessions.csv", index=False)
    lock = pd.DataFrame(lock_rows)
    per = lock.groupby(["cohort", "lag_s"], as_index=False).agg(
        arousal_switch_z=("arousal_switch_z", "mean"), arousal_pseudo_z=("arousal_pseudo_z", "mean"),
        n_participants=("participant_id", "nunique"), n_switches=("n_switches", "sum"))
    per["level"] = "cohort"
    for col, half in (("switch", 0.08), ("baseline", 0.06)):
        mid = per["arousal_switch_z" if col == "switch" else "arousal_pseudo_z"]
        per[f"{col}_ci_low"], per[f"{col}_ci_high"] = mid - half, mid + half
    pd.concat([lock, per], ignore_index=True).to_csv(out / "metrics/switch_locked.csv",
                                                     index=False)
    pd.DataFrame([
        {"scope": "all", "cohort": "", "reference": "", "n_participants": 6, "n_left_out": 0,
         "slope_z_per_s": 0.0102, "ci_low": 0.004, "ci_high": 0.0164, "change_z": 0.122,
         "statistic": 4.1, "df": 5, "p_value": 0.0093, "wilcoxon_p": 0.031, "direction": "rises",
         "note": ""}]).to_csv(out / "models/switch_locked_test.csv", index=False)
    def row(outcome, model, term, est, lo, hi, p, p_fdr, n_obs, scale, note=""):
        return {"outcome": outcome, "model": model, "term": term, "estimate": est,
                "std_error": (hi - lo) / 3.92, "ci_low": lo, "ci_high": hi, "p_value": p,
                "p_fdr": p_fdr, "n_participants": 6, "n_obs": n_obs, "scale": scale,
                "converged": True, "note": note}

    nan = np.nan
    # the models stage's layout: treatment terms "cohort[teen]", variance rows, p_fdr only
    # on the tested (cohort) terms
    comp = pd.DataFrame([
        row("switches_per_hour", "mixed_reml", "Intercept", 4.6, 4.4, 4.8, 1e-9, nan, 12, "log"),
        row("switches_per_hour", "mixed_reml", "cohort[teen]", 0.3365, 0.1013, 0.5717,
            0.0051, 0.0153, 12, "log"),
        row("switches_per_hour", "mixed_reml", "var(participant)", 0.01, nan, nan, nan, nan,
            12, "variance"),
        row("switches_per_hour", "mixed_reml", "var(residual)", 0.02, nan, nan, nan, nan,
            12, "variance"),
        row("switches", "poisson_gee", "cohort[teen]", 0.31, 0.08, 0.54, 0.008, nan, 12, "log"),
        row("dwell_median_s[screen]", "mixed_reml", "cohort[teen]", -2.5, -5.1, 0.1, 0.06,
            0.09, 12, "identity"),
        row("arousal_range", "mixed_reml", "Intercept", 2.8, 2.5, 3.1, 1e-6, nan, 24, "identity"),
        row("arousal_range", "mixed_reml", "cohort[teen]", -0.04, -0.138, 0.058, 0.42, 0.42, 24,
            "identity"),
        row("arousal_range", "mixed_reml", "state[multi]", -0.21, -0.367, -0.053, 0.009, nan,
            24, "identity"),
        row("arousal_range", "mixed_reml", "cohort[teen]:state[multi]", 0.35, 0.12, 0.58,
            0.004, 0.012, 24, "identity", note="participant variance at zero (boundary fit)"),
    ])
    comp.to_csv(out / "models/comparisons.csv", index=False)
    pd.DataFrame([{"item": "enjoyment", "cohort": "teen", "estimate": 0.3, "ci_low": -0.1,
                   "ci_high": 0.7, "p_value": 0.2}]).to_csv(out / "models/survey.csv", index=False)
    if optional:
        ag = []
        for pid in ("p01", "p04"):
            ag.append({"participant_id": pid, "session_id": "s1", "coder_a": "ana",
                       "coder_b": "ben", "seconds_compared": 1440, "agreement_attended": 0.9,
                       "kappa_attended": 0.84 if pid == "p01" else 0.78, "kappa_state": 0.9,
                       "switches_a": 40, "switches_b": 42, "switch_precision": 0.8,
                       "switch_recall": 0.85, "switch_f1": 0.82,
                       "kappa_attended_band": "almost perfect"})
        pd.DataFrame(ag).to_csv(out / "agreement/sessions.csv", index=False)
        n = np.arange(4, 42, 4)
        p = 1 - np.exp(-n / 14)
        pd.DataFrame({"participants_per_cohort": n, "power": p, "ci_low": p - 0.03,
                      "ci_high": np.minimum(p + 0.03, 1)}).to_csv(out / "power/power.csv",
                                                                  index=False)
    else:
        shutil.rmtree(out / "agreement")
        shutil.rmtree(out / "power")
    name = HOSTILE_STUDY if hostile else "Evening media study"
    config = {"study": {"name": name, "timezone": "Europe/Berlin"},
              "platforms": {"groups": PLATFORMS, "labels": {}},
              "cohorts": {"reference": "adult"},
              "models": {"fdr_q": 0.05, "switch_locked_window_s": 20, "switch_locked_pseudo": 50,
                         "switch_locked_pre_s": 12}}
    manifest = {
        "study": name, "config": config,
        "methods": {"signals": {"eda_lowpass": "butterworth", "scr_scoring": "trough_to_peak"},
                    "models": {"mixed_model": "linear mixed models by REML (Bates et al. 2015, "
                                              "J Stat Softw 67(1))",
                               "fdr": "Benjamini & Hochberg (1995), J R Stat Soc B "
                                      "57:289-300"}},
        "created_utc": "2026-01-05T10:00:00+00:00",
        "summary": ["12 of 12 sessions processed", "vocabulary declared: 3 platforms"],
        "inputs": {"roster.csv": "sha256:00"}, "outputs": {}, "versions": {"screenweave": "0.1.0"},
        "sessions_ok": 12, "sessions_total": 12,
    }
    (out / "manifest.json").write_text(json.dumps(manifest, indent=1), encoding="utf-8")
    return out
