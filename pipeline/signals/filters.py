"""Zero-phase Butterworth filtering in overlapping blocks.

``scipy.signal.sosfiltfilt`` on a whole 10-hour recording holds several copies of
it at once. Filtering block by block, each block with enough context on both sides
for the filter's response to die out, gives the same result (to about 1e-6 of the
signal's scale) in a fraction of the memory, and the blocks fit the processor cache.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import signal as sps

#: Samples per block (before context is added).
BLOCK = 1 << 18


def butterworth(order: int, cutoff_hz: float, fs: float, btype: str) -> np.ndarray:
    """Second-order sections of a digital Butterworth filter (designs are memoised:
    a design depends on nothing but its arguments; each caller gets its own copy)."""
    return _design(int(order), float(cutoff_hz), float(fs), btype).copy()


@lru_cache(maxsize=64)
def _design(order: int, cutoff_hz: float, fs: float, btype: str) -> np.ndarray:
    return sps.butter(order, cutoff_hz, btype=btype, fs=fs, output="sos")


def context_samples(cutoff_hz: float, fs: float) -> int:
    """Context per side: four periods of the cut-off, at least two seconds.

    A Butterworth response decays with a time constant of about 1 / (2 pi f_c zeta);
    four periods are well over twenty time constants.
    """
    return int(np.ceil(max(4.0 / cutoff_hz, 2.0) * fs))


def _padlen(sos: np.ndarray) -> int:
    # as scipy.signal.sosfiltfilt chooses it
    ntaps = 2 * len(sos) + 1
    ntaps -= min((sos[:, 2] == 0).sum(), (sos[:, 5] == 0).sum())
    return 3 * int(ntaps)


def _filtfilt(sos: np.ndarray, zi: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Forward-backward filtering with odd extension and steady-state initial
    conditions, the algorithm of scipy.signal.sosfiltfilt (zi computed once)."""
    edge = min(_padlen(sos), x.size - 1)
    if edge > 0:
        ext = np.concatenate((2 * x[0] - x[edge:0:-1], x, 2 * x[-1] - x[-2:-edge - 2:-1]))
    else:
        ext = np.array(x, dtype=float)
    y, _ = sps.sosfilt(sos, ext, zi=zi * ext[0])
    y = y[::-1]
    y, _ = sps.sosfilt(sos, y, zi=zi * y[0])
    y = y[::-1]
    return y[edge: edge + x.size] if edge > 0 else y


def filtfilt_blocks(sos: np.ndarray, x: np.ndarray, context: int,
                    out: np.ndarray | None = None) -> np.ndarray:
    """``sosfiltfilt(sos, x)`` computed block by block with ``context`` samples of
    overlap on each side (the recording's own ends are padded as sosfiltfilt does).

    Parameters
    ----------
    sos : ndarray
        Second-order sections.
    x : ndarray
        The signal (no NaN).
    context : int
        Samples of context per side.
    out : ndarray, optional
        Where to write the result (may not be ``x``).
    """
    n = x.size
    if out is None:
        out = np.empty(n, dtype=float)
    if n == 0:
        return out
    if n == 1:
        out[:] = x
        return out
    zi = sps.sosfilt_zi(sos)[:, :]
    block = max(BLOCK, 4 * context)
    if n <= block + 2 * context:
        out[:] = _filtfilt(sos, zi, x)
        return out
    for a in range(0, n, block):
        b = min(n, a + block)
        lo, hi = max(0, a - context), min(n, b + context)
        y = _filtfilt(sos, zi, x[lo:hi])
        out[a:b] = y[a - lo: b - lo]
    return out
