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

from pipeline.agreement.alpha import (coincidence_matrix, counts_from_positions,
                                      krippendorff_alpha_nominal, value_counts_by_unit)
from pipeline.agreement.events import compare_switches
from pipeline.agreement.kappa import (
    contingency_table_of_codes,
    kappa,
    landis_koch_band,
    observed_agreement,
)
from pipeline.config import AgreementSettings, DwellSettings, SwitchSettings
from pipeline.errors import StageError
from pipeline.metrics.states import state_codes
from pipeline.metrics.switching import find_bouts, find_switches
from pipeline.types import STATES, SessionKey

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
    labels: pd.DataFrame | None = None  # seconds x coders attended labels
    state_labels: pd.DataFrame | None = None
    #: (categories, coincidence matrix) of the attended labels and of the states, which
    #: the study's pooled alpha sums over sessions
    attended_coincidences: tuple[list[str], np.ndarray] | None = None
    state_coincidences: tuple[list[str], np.ndarray] | None = None


@dataclass(frozen=True)
class CoderCodes:
    """One coder's codes of one session, by second 0..n-1.

    Built once per coder by :func:`session_agreement` and shared by every pair the
    coder is in. Labels and states are small integers, so that tabulating hours of
    seconds is a count of integers rather than of strings.
    """

    attended: np.ndarray   # object: attended platform ('' for none), NaN where not coded
    label: np.ndarray      # int: position of the attended label in label_names, -1 not coded
    label_names: list[str]  # the session's attended labels ('none' for none), sorted
    state: np.ndarray      # int: position of the state in STATES, -1 where not coded
    coded: np.ndarray      # bool: the coder coded the second (attended not missing)


def _coder_columns(key: SessionKey, codes: pd.DataFrame,
                   duration_s: int) -> tuple[list[str], np.ndarray]:
    """Check a session's codes; return its coders (sorted) and each row's coder position.

    Refuses a coded second outside 0..duration_s - 1 and a second one coder codes
    twice.
    """
    second = codes["second"].to_numpy()
    outside = (second < 0) | (second >= duration_s)
    if outside.any():
        raise StageError(
            f"coded second {int(second[outside][0])} lies outside the "
            f"session (0..{duration_s - 1})", unit=key.label(), stage="agreement",
            hint="media_log seconds must fall within the session's start and end")
    # factorize the coder column once (cheap even for categorical or long logs) and
    # name each coder by its text, as the tables do
    code, uniques = pd.factorize(codes["coder"])
    names = [str(u) for u in np.asarray(uniques, dtype=object)]
    coders = sorted(set(names))
    position = np.array([coders.index(n) for n in names], dtype=np.int64)[code]
    # one slot per (coder, second): a slot filled twice is a second coded twice
    slot = position * duration_s + second.astype(np.int64)
    if len(slot) and np.bincount(slot).max() > 1:
        raise StageError("a coder codes one second twice", unit=key.label(),
                         stage="agreement", hint="ingest refuses duplicate rows; "
                         "pass the validated media log")
    return coders, position


def _wide(second: np.ndarray, position: np.ndarray, values: np.ndarray, n_coders: int,
          duration_s: int, missing: object = np.nan) -> np.ndarray:
    """Seconds 0..duration-1 by coders array of one code column (``missing`` = not coded).

    Filled by position (each row is one coder's code of one second, checked unique
    by :func:`_coder_columns`) rather than by a pivot, which costs far more on
    hours-long sessions. Text comes out as plain objects whatever dtype the log has.
    """
    table = np.full((duration_s, n_coders), missing, dtype=values.dtype)
    table[second, position] = values
    return table


def _by_coder(table: np.ndarray, coders: list[str]) -> pd.DataFrame:
    """A seconds x coders frame (index ``second``, columns ``coder``) of a wide array."""
    return pd.DataFrame(table, index=pd.RangeIndex(len(table), name="second"),
                        columns=pd.Index(coders, dtype=object, name="coder"))


def coder_timeline(attended: pd.Series | np.ndarray, keep: np.ndarray) -> pd.DataFrame:
    """A per-second timeline of one coder, with the columns the run's bout and switch
    functions read (second, coded, attended, signal_valid).

    ``attended`` holds seconds 0..n-1 in order (NA where this coder did not code the
    second); ``keep`` marks the seconds to treat as coded (those both coders of a
    pair coded). Signal validity plays no part in coder agreement, so
    ``signal_valid`` is True throughout. ``attended`` is a plain object column (None
    where not coded), which the bout functions read as it is.
    """
    attended = np.asarray(attended, dtype=object)
    coded = keep & pd.notna(attended)
    return pd.DataFrame({
        "second": np.arange(len(attended), dtype=np.int64),
        "coded": coded,
        "attended": np.where(coded, attended, None),
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


def compare_pair(key: SessionKey, coder_a: str, coder_b: str, a: CoderCodes, b: CoderCodes,
                 cfg: AgreementSettings, switching: SwitchSettings,
                 dwell: DwellSettings) -> PairAgreement:
    """Agreement of two coders of one session.

    Parameters
    ----------
    key
        The session.
    coder_a, coder_b
        The two coders; A is the reference of the switch precision and recall.
    a, b
        Their codes by second (see :class:`CoderCodes`).
    cfg, switching, dwell
        ``[agreement]`` (tolerance, matching rule) and the run's ``[switching]`` and
        ``[dwell]`` settings, so that switches are the run's switches.
    """
    both = a.coded & b.coded
    n_both = int(both.sum())

    # Tables over the labels either coder used in these seconds, in sorted order: the
    # session's label names are sorted, so their positions keep that order.
    names = a.label_names
    t_all = contingency_table_of_codes(a.label[both], b.label[both], len(names))
    seen = np.flatnonzero(t_all.sum(axis=0) + t_all.sum(axis=1))
    t_att, cats = t_all[np.ix_(seen, seen)], [names[i] for i in seen]
    t_state, st_cats = contingency_table_of_codes(a.state[both], b.state[both],
                                                  len(STATES)), list(STATES)

    tl_a = coder_timeline(a.attended, both)
    tl_b = coder_timeline(b.attended, both)
    sw = compare_switches(coder_switches(tl_a, switching, dwell),
                          coder_switches(tl_b, switching, dwell),
                          cfg.switch_tolerance_s, cfg.switch_matching)

    k_att = kappa(t_att)
    k_state = kappa(t_state)
    row = {
        "participant_id": key.participant_id, "session_id": key.session_id,
        "coder_a": coder_a, "coder_b": coder_b,
        "seconds_a": int(a.coded.sum()), "seconds_b": int(b.coded.sum()),
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
    coders, position = _coder_columns(key, codes, duration_s)
    result = SessionAgreement(key=key, coders=coders)
    if len(coders) < 2:  # most sessions: nothing to compare, and nothing more to pay
        return result
    second = codes["second"].to_numpy(dtype=np.int64)
    k = len(coders)
    # Attended labels: each distinct value once ('' -> 'none'), in sorted order, and
    # each row's label as its position in that order (-1 for a missing code).
    raw_code, raw = pd.factorize(codes["attended"])
    label_names, label_of_raw = np.unique(
        np.array([NONE if v == "" else v for v in np.asarray(raw, dtype=object)], dtype=object),
        return_inverse=True)
    label_names = label_names.tolist()
    label = _wide(second, position, np.append(label_of_raw, -1)[raw_code], k, duration_s,
                  missing=-1)
    # a state depends on one second's codes only: classify the log's rows once
    state = _wide(second, position, state_codes(codes["in_view"]), k, duration_s, missing=-1)
    attended = _wide(second, position, codes["attended"].to_numpy(dtype=object), k, duration_s)
    coded = label >= 0
    per_coder = [CoderCodes(attended=attended[:, j], label=label[:, j], label_names=label_names,
                            state=state[:, j], coded=coded[:, j]) for j in range(k)]
    for (i, coder_a), (j, coder_b) in combinations(enumerate(coders), 2):
        result.pairs.append(compare_pair(key, coder_a, coder_b, per_coder[i], per_coder[j],
                                         cfg, switching, dwell))

    # the study's pooled alpha adds up the sessions' coincidences
    result.attended_coincidences = (
        label_names, coincidence_matrix(counts_from_positions(label, len(label_names))))
    result.state_coincidences = (
        list(STATES), coincidence_matrix(counts_from_positions(state, len(STATES))))
    # the labels as text: NaN / None where a coder did not code
    result.labels = _by_coder(np.array(label_names + [np.nan], dtype=object)[label], coders)
    result.state_labels = _by_coder(np.array(list(STATES) + [None], dtype=object)[state],
                                    coders)
    att_labels, state_labels = result.labels, result.state_labels
    if len(coders) >= 3:
        n_coded = coded.sum(axis=1)
        result.alpha = {
            "participant_id": key.participant_id, "session_id": key.session_id,
            "n_coders": len(coders), "coders": ";".join(coders),
            "seconds_compared": int((n_coded >= 2).sum()),
            "seconds_all_coders": int((n_coded == len(coders)).sum()),
            "alpha_attended": krippendorff_alpha_nominal(value_counts_by_unit(att_labels)[0]),
            "alpha_state": krippendorff_alpha_nominal(value_counts_by_unit(state_labels)[0]),
        }
    return result
