"""The study's agreement tables, from the per-session results.

``study.csv`` holds one pooled row: the seconds of every session and coder pair are
put in one contingency table (coder A in rows, as in each pair) before kappa is
computed, and switch counts are summed before precision, recall and F1 are taken.
Pooled alpha uses every second, of every session, coded by at least two coders.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.agreement.alpha import pooled_alpha_from_coincidences
from pipeline.agreement.kappa import kappa, landis_koch_band, observed_agreement
from pipeline.agreement.session import (
    ALPHA_COLUMNS,
    CONFUSION_COLUMNS,
    MATCH_COLUMNS,
    NONE,
    PAIR_COLUMNS,
    SessionAgreement,
    session_agreement,
)
from pipeline.config import Config
from pipeline.errors import InputError
from pipeline.types import SessionKey, Study

#: Columns of OUT/agreement/study.csv, in order.
STUDY_COLUMNS = (
    "sessions", "coder_pairs", "coders", "seconds_compared",
    "agreement_attended", "kappa_attended", "kappa_attended_band",
    "kappa_attended_median", "kappa_attended_min", "kappa_attended_max",
    "agreement_state", "kappa_state", "kappa_state_band",
    "switches_a", "switches_b", "switches_matched",
    "switch_precision", "switch_recall", "switch_f1",
    "alpha_attended", "alpha_state", "switch_tolerance_s", "switch_matching",
)


def _square(tidy: pd.DataFrame, a: str, b: str, cats: list[str] | None = None) -> np.ndarray:
    table = tidy.pivot_table(index=a, columns=b, values="seconds", aggfunc="sum", fill_value=0)
    if cats is None:
        cats = sorted(set(table.index) | set(table.columns))
    return table.reindex(index=cats, columns=cats, fill_value=0).to_numpy()


def _ratio(num: float, den: float) -> float:
    return float(num / den) if den > 0 else float("nan")


def pooled_summary(results: list[SessionAgreement], tolerance_s: int,
                   matching: str) -> dict:
    """The study-level row of the agreement tables (see module docstring)."""
    pairs = [p for r in results for p in r.pairs]
    rows = pd.DataFrame([p.row for p in pairs], columns=list(PAIR_COLUMNS))
    confusion = pd.concat([p.confusion for p in pairs], ignore_index=True) if pairs else \
        pd.DataFrame(columns=list(CONFUSION_COLUMNS))
    states = pd.concat([p.state_table for p in pairs], ignore_index=True) if pairs else \
        pd.DataFrame(columns=["state_a", "state_b", "seconds"])
    t_att = _square(confusion, "platform_a", "platform_b") if pairs else np.zeros((0, 0))
    t_state = (_square(states, "state_a", "state_b", ["none", "single", "multi"])
               if pairs else np.zeros((3, 3)))
    k_att, k_state = kappa(t_att), kappa(t_state)
    n_a, n_b = int(rows["switches_a"].sum()), int(rows["switches_b"].sum())
    m = int(rows["switches_matched"].sum())

    att = [r.attended_coincidences for r in results if r.attended_coincidences is not None]
    st = [r.state_coincidences for r in results if r.state_coincidences is not None]
    alpha_att = pooled_alpha_from_coincidences(att)
    alpha_st = pooled_alpha_from_coincidences(st)
    kappas = rows["kappa_attended"].astype(float)
    coders = sorted({c for r in results if r.pairs for c in r.coders})
    return {
        "sessions": int(sum(1 for r in results if r.pairs)),
        "coder_pairs": len(pairs),
        "coders": ";".join(coders),
        "seconds_compared": int(rows["seconds_compared"].sum()),
        "agreement_attended": observed_agreement(t_att) if t_att.size else float("nan"),
        "kappa_attended": k_att, "kappa_attended_band": landis_koch_band(k_att),
        "kappa_attended_median": float(kappas.median()) if kappas.notna().any() else np.nan,
        "kappa_attended_min": float(kappas.min()) if kappas.notna().any() else np.nan,
        "kappa_attended_max": float(kappas.max()) if kappas.notna().any() else np.nan,
        "agreement_state": observed_agreement(t_state),
        "kappa_state": k_state, "kappa_state_band": landis_koch_band(k_state),
        "switches_a": n_a, "switches_b": n_b, "switches_matched": m,
        "switch_precision": _ratio(m, n_b), "switch_recall": _ratio(m, n_a),
        "switch_f1": _ratio(2 * m, n_a + n_b),
        "alpha_attended": alpha_att, "alpha_state": alpha_st,
        "switch_tolerance_s": tolerance_s, "switch_matching": matching,
    }


def agreement_tables(results: list[SessionAgreement], tolerance_s: int,
                     matching: str) -> dict[str, pd.DataFrame]:
    """The tables of OUT/agreement/, by file name, from every session's result.

    * ``sessions.csv``: one row per session and pair of coders (PAIR_COLUMNS);
    * ``confusion.csv``: seconds per (platform of A, platform of B) and pair;
    * ``alpha.csv``: one row per session with three or more coders;
    * ``switch_matches.csv``: one row per matched pair of switches;
    * ``study.csv``: one pooled row (:func:`pooled_summary`).
    """
    pairs = [p for r in results for p in r.pairs]

    def cat(frames: list[pd.DataFrame], columns: tuple[str, ...]) -> pd.DataFrame:
        frames = [f for f in frames if len(f)]
        if not frames:
            return pd.DataFrame(columns=list(columns))
        return pd.concat(frames, ignore_index=True)[list(columns)]

    return {
        "sessions.csv": pd.DataFrame([p.row for p in pairs], columns=list(PAIR_COLUMNS)),
        "confusion.csv": cat([p.confusion for p in pairs], CONFUSION_COLUMNS),
        "alpha.csv": pd.DataFrame([r.alpha for r in results if r.alpha is not None],
                                  columns=list(ALPHA_COLUMNS)),
        "switch_matches.csv": cat([p.matches for p in pairs], MATCH_COLUMNS),
        "study.csv": pd.DataFrame([pooled_summary(results, tolerance_s, matching)],
                                  columns=list(STUDY_COLUMNS)),
    }


def check_reserved_code(log: pd.DataFrame) -> None:
    """Refuse a platform code that the agreement tables use for 'nothing attended'."""
    attended = log["attended"]
    # a categorical log (as ingest makes it) is checked on its distinct values only
    values = (attended.cat.categories if isinstance(attended.dtype, pd.CategoricalDtype)
              else attended.astype(str).unique())
    if NONE in set(values):
        raise InputError(
            "media_log.csv", f"is a platform code, and {NONE!r} is how the agreement "
            "tables name 'nothing attended'", column="attended", value=NONE,
            hint="rename the platform code (e.g. 'none_device'); leave attended empty "
            "for nothing attended")


def study_agreement(study: Study, cfg: Config) -> list[SessionAgreement]:
    """Every session's agreement result (sessions with one coder give no pairs).

    Uses ``cfg.agreement`` and, so that switches are the run's switches,
    ``cfg.switching`` and ``cfg.dwell``.
    """
    log = study.media_log
    check_reserved_code(log)
    durations = study.sessions.set_index(["participant_id", "session_id"])["duration_s"]
    results: list[SessionAgreement] = []
    # observed=True: the log's ID columns may be categorical (only the pairs present wanted)
    for (pid, sid), codes in log.groupby(["participant_id", "session_id"], sort=True,
                                         observed=True):
        key = SessionKey(str(pid), str(sid))
        # the agreement code sees plain strings and int64 seconds whatever dtypes ingest chose
        codes = codes[["second", "in_view", "attended", "coder"]].astype(
            {"second": np.int64, "in_view": object, "attended": object, "coder": object})
        results.append(session_agreement(
            key, codes, int(durations[(pid, sid)]), cfg.agreement, cfg.switching, cfg.dwell))
    return results
