"""Runs of consecutive samples, checked against a plain loop."""

from __future__ import annotations

import numpy as np
import pytest

from pipeline.signals.runs import runs_of


def _runs_by_loop(mask: np.ndarray) -> tuple[list[int], list[int]]:
    starts, ends = [], []
    for i, on in enumerate(mask):
        before = mask[i - 1] if i > 0 else False
        if on and not before:
            starts.append(i)
        if before and not on:
            ends.append(i)
    if mask.size and mask[-1]:
        ends.append(mask.size)
    return starts, ends


@pytest.mark.parametrize("seed", range(20))
def test_runs_match_a_loop(seed):
    rng = np.random.default_rng(seed)
    mask = rng.random(int(rng.integers(1, 200))) < rng.random()
    starts, ends = runs_of(mask)
    assert starts.dtype == ends.dtype == np.int64
    expect = _runs_by_loop(mask)
    assert starts.tolist() == expect[0] and ends.tolist() == expect[1]


def test_edge_cases():
    for mask, expect in [([], ([], [])), ([True], ([0], [1])), ([False], ([], [])),
                         ([True] * 5, ([0], [5])), ([True, False, True], ([0, 2], [1, 3]))]:
        starts, ends = runs_of(np.array(mask, dtype=bool))
        assert (starts.tolist(), ends.tolist()) == expect
