"""Per-second media state (CONTRACT §2): none / single / multi, and the fine state."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.types import STATES, TEXT


def _distinct(in_view: pd.Series) -> tuple[np.ndarray, list[str], np.ndarray]:
    """Factor codes of ``in_view`` (-1 where NA), its distinct values as text, and how
    many platforms each distinct value has in view.

    A session has hours of seconds but only a handful of distinct in-view
    combinations: the state functions classify each distinct value once and spread
    the answers back to the seconds by their factor code.
    """
    codes, uniques = pd.factorize(in_view, use_na_sentinel=True)
    texts = [str(u) for u in np.asarray(uniques, dtype=object)]
    n = np.array([0 if t == "" else t.count(";") + 1 for t in texts], dtype=np.int64)
    return codes, texts, n


def _state_name(n_in_view: int) -> str:
    return STATES[min(n_in_view, 2)]  # none (0), single (1), multi (2 or more)


def state_codes(in_view: pd.Series) -> np.ndarray:
    """The coarse state of :func:`classify_states` as a small integer per second.

    The state's position in :data:`pipeline.types.STATES` (0 none, 1 single, 2
    multi), -1 where uncoded; for callers that tabulate states over many seconds.
    """
    codes, _, n = _distinct(in_view)
    # the trailing -1 is what code -1 (uncoded) reads
    return np.append(np.minimum(n, 2), -1)[codes]


def classify_states(in_view: pd.Series) -> pd.DataFrame:
    """Coarse and fine state of each coded second from its ``in_view`` codes.

    ``in_view`` holds the sorted codes joined by ';' ('' for none; NA where uncoded).
    Returns columns n_in_view (Int64), state ('none'/'single'/'multi') and fine_state
    (the sorted codes joined by '+', 'none' for nothing in view); NA where uncoded.
    """
    codes, texts, u_n = _distinct(in_view)
    coded = codes >= 0
    # per distinct value, plus a trailing 0 / None that code -1 (uncoded) reads
    n = np.append(u_n, 0)[codes]
    state = np.array([_state_name(k) for k in u_n] + [None], dtype=object)[codes]
    fine = np.array(["none" if k == 0 else t.replace(";", "+") for t, k in zip(texts, u_n)]
                    + [None], dtype=object)[codes]
    return pd.DataFrame({
        "n_in_view": pd.Series(n, index=in_view.index, dtype="Int64").where(coded, pd.NA),
        "state": pd.array(state, dtype=TEXT),
        "fine_state": pd.array(fine, dtype=TEXT),
    }, index=in_view.index)
