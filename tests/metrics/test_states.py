"""Per-second media state: the per-distinct-value classification against a per-second one."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.metrics.states import classify_states, state_codes
from pipeline.types import STATES, TEXT


def _by_second(in_view: pd.Series) -> pd.DataFrame:
    """The contract (CONTRACT §2) applied second by second, as plainly as possible."""
    n, state, fine = [], [], []
    for value in in_view:
        if pd.isna(value):
            n.append(pd.NA)
            state.append(pd.NA)
            fine.append(pd.NA)
            continue
        codes = str(value).split(";") if value != "" else []
        n.append(len(codes))
        state.append("none" if not codes else "single" if len(codes) == 1 else "multi")
        fine.append("+".join(codes) if codes else "none")
    return pd.DataFrame({"n_in_view": pd.array(n, dtype="Int64"),
                         "state": pd.array(state, dtype=TEXT),
                         "fine_state": pd.array(fine, dtype=TEXT)}, index=in_view.index)


def _random_in_view(seed: int, n: int = 400) -> pd.Series:
    rng = np.random.default_rng(seed)
    choices = np.array(["", "tv", "phone", "phone;tv", "laptop;phone;tv", None, np.nan],
                       dtype=object)
    # a shuffled, non-default index: the result must keep it
    return pd.Series(choices[rng.integers(0, len(choices), n)], index=rng.permutation(n) + 7)


@pytest.mark.parametrize("seed", range(3))
@pytest.mark.parametrize("dtype", [object, "string", "category"])
def test_classify_states_matches_a_second_by_second_classification(seed, dtype):
    in_view = _random_in_view(seed).astype(dtype)
    pd.testing.assert_frame_equal(classify_states(in_view), _by_second(in_view))


def test_classify_states_of_no_seconds_and_of_uncoded_seconds_only():
    pd.testing.assert_frame_equal(classify_states(pd.Series([], dtype="string")),
                                  _by_second(pd.Series([], dtype="string")))
    uncoded = pd.Series([None, None], dtype=object)
    assert classify_states(uncoded).isna().all().all()


@pytest.mark.parametrize("dtype", [object, "category"])
def test_state_codes_are_positions_in_states(dtype):
    in_view = _random_in_view(4).astype(dtype)
    names = classify_states(in_view)["state"]
    expected = [-1 if pd.isna(s) else STATES.index(s) for s in names]
    assert state_codes(in_view).tolist() == expected
