"""Runs of consecutive samples: find them, widen them, fill them.

Every artifact rule yields a boolean mask; masks are turned into runs (start
inclusive, end exclusive, in samples) so that padding, merging and interpolation
cost time in proportion to the number of runs, not the number of samples.
"""

from __future__ import annotations

import numpy as np


def runs_of(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start (inclusive) and end (exclusive) indices of the True runs of ``mask``."""
    mask = np.asarray(mask, dtype=bool)
    # With a False added at both ends, the steps of the mask as 0/1 are +1 where a run
    # starts and -1 just past where one ends (one byte per sample throughout, so a
    # mask that flips every few samples stays cheap)
    padded = np.zeros(mask.size + 2, dtype=np.int8)
    padded[1:-1] = mask
    change = np.diff(padded)
    starts = np.flatnonzero(change == 1)
    ends = np.flatnonzero(change == -1)
    return starts.astype(np.int64, copy=False), ends.astype(np.int64, copy=False)


def merge_runs(starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Merge overlapping or touching runs (given sorted by start)."""
    if starts.size == 0:
        return starts, ends
    reach = np.maximum.accumulate(ends)
    new = np.r_[True, starts[1:] > reach[:-1]]
    group_end_idx = np.r_[np.flatnonzero(new)[1:] - 1, starts.size - 1]
    return starts[new], reach[group_end_idx]


def mask_from_runs(starts: np.ndarray, ends: np.ndarray, n: int) -> np.ndarray:
    """Boolean mask of length ``n``, True inside the (merged, sorted) runs."""
    if starts.size == 0:
        return np.zeros(n, dtype=bool)
    bounds = np.empty(2 * starts.size + 2, dtype=np.int64)
    bounds[0] = 0
    bounds[1:-1:2] = starts
    bounds[2:-1:2] = ends
    bounds[-1] = n
    lengths = np.diff(bounds)
    values = np.zeros(lengths.size, dtype=bool)
    values[1::2] = True
    return np.repeat(values, lengths)


def run_indices(starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every sample index inside the runs, and which run each belongs to."""
    lengths = ends - starts
    total = int(lengths.sum())
    run = np.repeat(np.arange(starts.size), lengths)
    offset = np.arange(total) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    return starts[run] + offset, run


def fill_linear(x: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> None:
    """Replace each run by the straight line between its neighbouring samples, in place.

    A run touching the start or end of ``x`` takes the value of its one neighbour; a
    run covering all of ``x`` is left alone.
    """
    n = x.size
    keep = ~((starts == 0) & (ends == n))
    starts, ends = starts[keep], ends[keep]
    if starts.size == 0:
        return
    left = np.where(starts > 0, x[np.maximum(starts - 1, 0)], np.nan)
    right = np.where(ends < n, x[np.minimum(ends, n - 1)], np.nan)
    left = np.where(np.isnan(left), right, left)
    right = np.where(np.isnan(right), left, right)
    idx, run = run_indices(starts, ends)
    frac = (idx - starts[run] + 1) / (ends[run] - starts[run] + 1)
    x[idx] = left[run] + (right[run] - left[run]) * frac
