"""One session's agreement between its coders: the rows of OUT/agreement/*.csv.

The stage is a pure function of one session's media-log rows (all coders) and the
settings it uses; the ``agree`` command reads the study and writes the tables.

What is compared
----------------
Only seconds coded by both coders of a pair (``seconds_compared``) enter a pair's
numbers. Each second is a unit with two labels:

* attended: the attended platform, or ``none`` (nothing attended);
* state: ``none`` / ``single`` / ``multi`` (CONTRACT §2), from the codes in view.

Switches are found by the run's own definition (:func:`pipeline.metrics.switching.
find_bouts` and :func:`~pipeline.metrics.switching.find_switches`), applied to each
coder's codes *restricted to the seconds both coded*: a second only one of them
coded is uncoded for both, so a switch across it is broken for both alike and the
two coders are compared on the same stretch of the session. Coder B's switches are
then matched one-to-one to coder A's (:mod:`pipeline.agreement.events`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations

import numpy as np
import pandas as pd

from pipeline.agreement.alpha import krippendorff_alpha_nominal, value_counts_by_unit
from pipeline.agreement.events import compare_switches
from pipeline.agreement.kappa import (
    contingency_table,
    kappa,
    landis_koch_band,
    observed_agreement,
)
from pipeline.config import AgreementSettings, DwellSettings, SwitchSettings
from pipeline.errors import StageError
from pipeline.metrics.states import classify_states
from pipeline.metrics.switching import find_bouts, find_switches
from pipeline.types import SessionKey

#: Label of a second with nothing attended, in the agreement tables.
NONE = "none"

#: Columns of OUT/agreement/sessions.csv, in order.
PAIR_COLUMNS = (
    "participant_id", "session_id", "coder_a", "coder_b",
    "seconds_a", "seconds_b", "seconds_compared",
    "agreement_attended", "kappa_attended", "kappa_attended_band",
    "agreement_state", "kappa_state", "kappa_state_band",
    "switches_a", "switches_b", "switches_matched",
    "switch_precision", "switch_recall", "switch_f1",
    "switch_tolerance_s", "switch_matching",
)

#: Columns of OUT/agreement/confusion.csv, in order.
CONFUSION_COLUMNS = ("participant_id", "session_id", "coder_a", "coder_b",
                     "platform_a", "platform_b", "seconds")

#: Columns of OUT/agreement/alpha.csv, in order.
ALPHA_COLUMNS = ("participant_id", "session_id", "n_coders", "coders", "seconds_compared",
                 "seconds_all_coders", "alpha_attended", "alpha_state")

#: Columns of OUT/agreement/switch_matches.csv, in order.
MATCH_COLUMNS = ("participant_id", "session_id", "coder_a", "coder_b", "from_platform",
                 "to_platform", "second_a", "second_b", "offset_s")


@dataclass
class PairAgreement:
    """Agreement of one pair of coders on one session."""

    row: dict                     # one row of sessions.csv (PAIR_COLUMNS)
    confusion: pd.DataFrame       # rows of confusion.csv (CONFUSION_COLUMNS)
    state_table: pd.DataFrame     # coder A state x coder B state, seconds (for pooling)
    matches: pd.DataFrame         # rows of switch_matches.csv (MATCH_COLUMNS)


@dataclass
class SessionAgreement:
    """Everything the agreement tables hold for one session."""

    key: SessionKey
    coders: list[str]
    pairs: list[PairAgreement] = field(default_factory=list)
    alpha: dict | None = None     # one row of alpha.csv, for sessions with >= 3 coders
    labels: pd.DataFrame | None = None  # seconds x coders attended labels (for pooling)
    state_labels: pd.DataFrame | None = None


def _wide(codes: pd.DataFrame, column: str, coders: list[str], duration_s: int) -> pd.DataFrame:
    """Seconds 0..duration-1 by coders table of one code column (NA = not coded)."""
    wide = codes.pivot(index="second", columns="coder", values=column)
    return wide.reindex(index=pd.RangeIndex(duration_s, name="second"), columns=coders)


def coder_timeline(in_view: pd.Series, attended: pd.Series, keep: np.ndarray) -> pd.DataFrame:
    """A per-second timeline of one coder, for the run's bout and switch functions.

    ``in_view`` and ``attended`` are indexed by second 0..n-1 (NA where this coder
    did not code the second); ``keep`` marks the seconds to treat as coded (those
    both coders of a pair coded). Signal validity plays no part in coder agreement,
    so ``signal_valid`` is True throughout.
    """
    coded = keep & attended.notna().to_numpy()
    return pd.DataFrame({
        "second": np.arange(len(attended), dtype=np.int64),
        "coded": coded,
        "in_view": pd.array(np.where(coded, in_view.to_numpy(dtype=object), None),
                            dtype="string"),
        "attended": pd.array(np.where(coded, attended.to_numpy(dtype=object), None),
                             dtype="string"),
        "signal_valid": np.ones(len(attended), dtype=bool),
    })


def coder_switches(timeline: pd.DataFrame, switching: SwitchSettings,
                   dwell: DwellSettings) -> pd.DataFrame:
    """Switch events of one coder's timeline by the run's definition, for matching."""
    bouts = find_bouts(timeline, switching, dwell)
    sw = find_switches(bouts, timeline, switching)
    return pd.DataFrame({"time_s": sw["second"].to_numpy(dtype=float),
                         "from_platform": sw["from_platform"].to_numpy(dtype=object),
                         "to_platform": sw["to_platform"].to_numpy(dtype=object)})


def _tidy_table(table: np.ndarray, cats: list[str], a_name: str, b_name: str) -> pd.DataFrame:
    k = len(cats)
    return pd.DataFrame({a_name: np.repeat(np.array(cats, dtype=object), k),
                         b_name: np.tile(np.array(cats, dtype=object), k),
                         "seconds": table.reshape(-1).astype(np.int64)})


def compare_pair(key: SessionKey, coder_a: str, coder_b: str, in_view: pd.DataFrame,
                 attended: pd.DataFrame, cfg: AgreementSettings, switching: SwitchSettings,
                 dwell: DwellSettings) -> PairAgreement:
    """Agreement of two coders of one session.

    Parameters
    ----------
    key
        The session.
    coder_a, coder_b
        The two coders; A is the reference of the switch precision and recall.
    in_view, attended
        Seconds 0..n-1 by coder tables of the codes ('' for none, NA where the coder
        did not code the second).
    cfg, switching, dwell
        ``[agreement]`` (tolerance, matching rule) and the run's ``[switching]`` and
        ``[dwell]`` settings, so that switches are the run's switches.
    """
    a_att, b_att = attended[coder_a], attended[coder_b]
    both = (a_att.notna() & b_att.notna()).to_numpy()
    n_both = int(both.sum())

    lab_a = a_att[both].replace("", NONE).to_numpy(dtype=object)
    lab_b = b_att[both].replace("", NONE).to_numpy(dtype=object)
    t_att, cats = contingency_table(lab_a, lab_b)
    st_a = classify_states(in_view[coder_a][both].astype("string"))["state"].to_numpy(object)
    st_b = classify_states(in_view[coder_b][both].astype("string"))["state"].to_numpy(object)
    t_state, st_cats = contingency_table(st_a, st_b, categories=["none", "single", "multi"])

    tl_a = coder_timeline(in_view[coder_a], a_att, both)
    tl_b = coder_timeline(in_view[coder_b], b_att, both)
    sw = compare_switches(coder_switches(tl_a, switching, dwell),
                          coder_switches(tl_b, switching, dwell),
                          cfg.switch_tolerance_s, cfg.switch_matching)

    k_att = kappa(t_att)
    k_state = kappa(t_state)
    row = {
        "participant_id": key.participant_id, "session_id": key.session_id,
        "coder_a": coder_a, "coder_b": coder_b,
        "seconds_a": int(a_att.notna().sum()), "seconds_b": int(b_att.notna().sum()),
        "seconds_compared": n_both,
        "agreement_attended": observed_agreement(t_att),
        "kappa_attended": k_att, "kappa_attended_band": landis_koch_band(k_att),
        "agreement_state": observed_agreement(t_state),
        "kappa_state": k_state, "kappa_state_band": landis_koch_band(k_state),
        "switches_a": sw.switches_a, "switches_b": sw.switches_b,
        "switches_matched": sw.matched,
        "switch_precision": sw.precision, "switch_recall": sw.recall, "switch_f1": sw.f1,
        "switch_tolerance_s": cfg.switch_tolerance_s, "switch_matching": cfg.switch_matching,
    }
    ids = {"participant_id": key.participant_id, "session_id": key.session_id,
           "coder_a": coder_a, "coder_b": coder_b}
    confusion = _tidy_table(t_att, cats, "platform_a", "platform_b").assign(**ids)
    state_table = _tidy_table(t_state, st_cats, "state_a", "state_b")
    matches = pd.DataFrame({
        **ids,
        "from_platform": sw.pairs["from_platform"], "to_platform": sw.pairs["to_platform"],
        "second_a": sw.pairs["time_a_s"].astype(np.int64),
        "second_b": sw.pairs["time_b_s"].astype(np.int64),
        "offset_s": sw.pairs["offset_s"].astype(np.int64),
    }, columns=list(MATCH_COLUMNS))
    return PairAgreement(row=row, confusion=confusion[list(CONFUSION_COLUMNS)],
                         state_table=state_table, matches=matches)


def _check_codes(key: SessionKey, codes: pd.DataFrame, duration_s: int) -> None:
    outside = (codes["second"] < 0) | (codes["second"] >= duration_s)
    if outside.any():
        raise StageError(
            f"coded second {int(codes.loc[outside, 'second'].iloc[0])} lies outside the "
            f"session (0..{duration_s - 1})", unit=key.label(), stage="agreement",
            hint="media_log seconds must fall within the session's start and end")
    if codes.duplicated(["second", "coder"]).any():
        raise StageError("a coder codes one second twice", unit=key.label(),
                         stage="agreement", hint="ingest refuses duplicate rows; "
                         "pass the validated media log")


def session_agreement(key: SessionKey, codes: pd.DataFrame, duration_s: int,
                      cfg: AgreementSettings, switching: SwitchSettings,
                      dwell: DwellSettings) -> SessionAgreement:
    """Agreement of every pair of a session's coders, and alpha for three or more.

    Parameters
    ----------
    key
        The session.
    codes
        The session's media-log rows of all coders: second, in_view, attended, coder.
    duration_s
        The session's length in seconds (the timeline is 0..duration_s - 1).
    cfg, switching, dwell
        ``[agreement]``, ``[switching]`` and ``[dwell]`` settings.

    Returns
    -------
    SessionAgreement
        One :class:`PairAgreement` per pair of coders (coder A first in sorted
        order), and for three or more coders one row of Krippendorff's alpha over
        every second coded by at least two of them. A session with one coder gives
        no pairs.
    """
    _check_codes(key, codes, duration_s)
    coders = sorted(codes["coder"].astype(str).unique().tolist())
    result = SessionAgreement(key=key, coders=coders)
    if len(coders) < 2:
        return result
    codes = codes.assign(coder=codes["coder"].astype(str))
    attended = _wide(codes, "attended", coders, duration_s)
    in_view = _wide(codes, "in_view", coders, duration_s)
    for coder_a, coder_b in combinations(coders, 2):
        result.pairs.append(compare_pair(key, coder_a, coder_b, in_view, attended,
                                         cfg, switching, dwell))

    att_labels = attended.where(attended != "", NONE)
    state_labels = in_view.apply(lambda col: classify_states(col.astype("string"))["state"])
    state_labels = state_labels.astype(object).where(state_labels.notna(), None)
    result.labels, result.state_labels = att_labels, state_labels
    if len(coders) >= 3:
        n_coded = attended.notna().sum(axis=1)
        result.alpha = {
            "participant_id": key.participant_id, "session_id": key.session_id,
            "n_coders": len(coders), "coders": ";".join(coders),
            "seconds_compared": int((n_coded >= 2).sum()),
            "seconds_all_coders": int((n_coded == len(coders)).sum()),
            "alpha_attended": krippendorff_alpha_nominal(value_counts_by_unit(att_labels)[0]),
            "alpha_state": krippendorff_alpha_nominal(value_counts_by_unit(state_labels)[0]),
        }
    return result
