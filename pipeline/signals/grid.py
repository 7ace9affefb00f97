"""A uniform time grid on the sensor clock, and channels resampled onto it.

Recordings arrive regularly sampled (most), jittered, with gaps, or with channels at
different rates (NaN where a channel has no sample). Every later step wants one
uniform grid: ``make_grid`` picks it, ``to_grid`` puts a channel on it by linear
interpolation between that channel's own samples, never across a gap longer than
``max_interp_s`` (those grid points stay NaN).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pipeline.signals.runs import fill_linear, runs_of

#: Steps of a "regular" time axis may differ by this share of the mean step (timestamps
#: written with limited precision jitter by a few parts in ten thousand).
REGULAR_JITTER = 1e-3


@dataclass(frozen=True)
class Grid:
    """``time_s = t0 + k / fs`` for k = 0 .. n-1."""

    t0: float
    fs: float
    n: int
    same_as_input: bool  # the recording's own time axis already is this grid

    def times(self, source: np.ndarray | None = None) -> np.ndarray:
        """The grid's times (the recording's own array when it already is the grid)."""
        if self.same_as_input and source is not None:
            return source
        return self.t0 + np.arange(self.n, dtype=float) / self.fs


def _steps_regular(time_s: np.ndarray) -> tuple[bool, float]:
    n = time_s.size
    mean_step = (time_s[-1] - time_s[0]) / (n - 1)
    steps = np.diff(time_s)
    lo, hi = float(steps.min()), float(steps.max())
    regular = (hi - lo) <= REGULAR_JITTER * mean_step
    if regular:
        return True, float(mean_step)
    # the typical step of an irregular axis: the median, on a subsample for speed
    return False, float(np.median(steps[:: max(1, steps.size // 100_000)]))


def make_grid(time_s: np.ndarray, resample_hz: float | None) -> Grid:
    """Choose the uniform grid for a recording.

    Parameters
    ----------
    time_s : ndarray
        The recording's sensor-clock times, strictly increasing.
    resample_hz : float or None
        The grid's rate; None keeps the recording's own (median) rate, and a regularly
        sampled recording then keeps its own time axis untouched.
    """
    n = time_s.size
    if n < 2:
        return Grid(float(time_s[0]) if n else 0.0, float(resample_hz or 1.0), n, True)
    regular, step = _steps_regular(time_s)
    fs = float(resample_hz) if resample_hz else 1.0 / step
    if regular and abs(fs * step - 1.0) <= REGULAR_JITTER:
        return Grid(float(time_s[0]), 1.0 / step, n, True)
    span = float(time_s[-1] - time_s[0])
    return Grid(float(time_s[0]), fs, int(np.floor(span * fs + 1e-9)) + 1, False)


def interp_within(t: np.ndarray, tx: np.ndarray, vx: np.ndarray,
                  max_gap_s: float) -> np.ndarray:
    """Linear interpolation of samples (tx, vx) at times t, NaN wherever the two
    neighbouring samples are more than ``max_gap_s`` apart or t lies outside them.
    A time that coincides with a sample takes that sample's value."""
    out = np.full(t.size, np.nan)
    if tx.size == 0:
        return out
    right = np.searchsorted(tx, t, side="left")
    r = np.minimum(right, tx.size - 1)
    exact = tx[r] == t
    inside = (right > 0) & (right < tx.size)
    l = np.maximum(right - 1, 0)
    ok = exact | (inside & ((tx[r] - tx[l]) <= max_gap_s + 1e-9))
    out[ok] = np.interp(t[ok], tx, vx)
    return out


def to_grid(grid: Grid, time_s: np.ndarray, values: np.ndarray,
            max_interp_s: float, copy: bool = False) -> np.ndarray:
    """One channel on the grid: NaN where it has no sample within reach.

    On a recording whose time axis is the grid the channel is returned as it is when
    complete (a copy with ``copy=True``, for a caller that writes into the result);
    runs of missing samples no longer than ``max_interp_s`` are bridged by straight
    lines (in a copy). Otherwise each grid point is linearly interpolated between the
    channel's two neighbouring samples when they are at most ``max_interp_s`` apart,
    else NaN.
    """
    if grid.same_as_input:
        missing = np.isnan(values)
        if not missing.any():
            return np.array(values, dtype=float, copy=True) if copy else values
        s, e = runs_of(missing)
        # a gap of k missing samples spans k + 1 sample steps
        short = ((e - s + 1) <= max_interp_s * grid.fs + 1e-9) & (s > 0) & (e < values.size)
        out = np.array(values, dtype=float, copy=True)
        fill_linear(out, s[short], e[short])
        return out
    have = np.isfinite(values)
    return interp_within(grid.times(), time_s[have], values[have], max_interp_s)
