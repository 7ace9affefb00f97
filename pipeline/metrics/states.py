"""Per-second media state (CONTRACT §2): none / single / multi, and the fine state."""

from __future__ import annotations

import numpy as np
import pandas as pd


def classify_states(in_view: pd.Series) -> pd.DataFrame:
    """Coarse and fine state of each coded second from its ``in_view`` codes.

    ``in_view`` holds the sorted codes joined by ';' ('' for none; NA where uncoded).
    Returns columns n_in_view (Int64), state ('none'/'single'/'multi') and fine_state
    (the sorted codes joined by '+', 'none' for nothing in view); NA where uncoded.
    """
    coded = in_view.notna().to_numpy()
    text = in_view.fillna("").astype(str)
    n = np.where(text.to_numpy() == "", 0, text.str.count(";").to_numpy() + 1)
    state = np.select([n == 0, n == 1], ["none", "single"], "multi").astype(object)
    fine = np.where(n == 0, "none", text.str.replace(";", "+", regex=False)).astype(object)
    state[~coded] = None
    fine[~coded] = None
    return pd.DataFrame({
        "n_in_view": pd.Series(n, index=in_view.index, dtype="Int64").where(coded, pd.NA),
        "state": pd.array(state, dtype="string"),
        "fine_state": pd.array(fine, dtype="string"),
    }, index=in_view.index)
