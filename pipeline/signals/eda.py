"""Cleaning skin conductance: decimation to the kept rate, then a zero-phase
Butterworth low-pass.

A recording sampled faster than ``[signals.eda] analysis_hz`` is first reduced to
every k-th sample by a centred (zero-phase) second-order cascaded-integrator-comb
filter: the average of a k-sample boxcar applied twice, a triangle of 2k - 1 taps
whose response is zero at every frequency that folds onto 0 Hz. The cleaning
low-pass then runs at the kept rate.
"""

from __future__ import annotations

import numpy as np

from pipeline.config import EdaSettings
from pipeline.signals.filters import butterworth, context_samples, filtfilt_blocks

#: A cut-off above this share of the Nyquist rate is lowered to it.
MAX_NYQUIST_SHARE = 0.8


def effective_lowpass_hz(fs: float, cfg: EdaSettings) -> float:
    """The cut-off actually used: ``lowpass_hz``, at most 0.8 x the Nyquist rate."""
    return float(min(cfg.lowpass_hz, MAX_NYQUIST_SHARE * fs / 2.0))


def decimate_cic(x: np.ndarray, step: int) -> np.ndarray:
    """Every ``step``-th sample of x after a centred triangular (CIC, order 2) filter.

    Output i is centred on input sample i * step; the ends are extended with the end
    values. ``step == 1`` returns a copy.

    References
    ----------
    Hogenauer, E. B. (1981). An economical class of digital filters for decimation and
    interpolation. IEEE Transactions on Acoustics, Speech, and Signal Processing
    29(2), 155-162.
    """
    if step == 1:
        return np.array(x, dtype=float, copy=True)
    n = x.size
    k = step
    full, rest = divmod(n, k)
    m = full + (1 if rest else 0)
    # output i = (sum_j (k - j) x[i k + j] + sum_j j x[(i - 1) k + j]) / k^2, j = 0..k-1
    current = (k - np.arange(k)).astype(float)
    previous = np.arange(k, dtype=float)
    out = np.empty(m)
    lag = np.empty(m)
    if full:
        blocks = x[: full * k].reshape(full, k)
        out[:full] = np.einsum("ij,j->i", blocks, current)
        behind = np.einsum("ij,j->i", blocks[: full if rest else full - 1], previous)
        lag[1: behind.size + 1] = behind
    if rest:
        tail = np.concatenate((x[full * k:], np.full(k - rest, x[-1])))
        out[full] = tail @ current
    lag[0] = x[0] * previous.sum()  # before the start: the first value
    out += lag
    out /= k * k
    # past the end: the last value (only the last output reaches past it)
    return out


def lowpass_butterworth(x: np.ndarray, fs: float, cfg: EdaSettings,
                        out: np.ndarray | None = None) -> np.ndarray:
    """Zero-phase Butterworth low-pass of a gap-free skin conductance series.

    The filter of order ``lowpass_order`` and cut-off ``lowpass_hz`` runs forwards
    and backwards (no phase shift, so SCR onsets stay in place).

    References
    ----------
    Boucsein, W. (2012). Electrodermal Activity, 2nd ed. Springer (low-pass smoothing
    before scoring). Makowski, D., et al. (2021). NeuroKit2: A Python toolbox for
    neurophysiological signal processing. Behavior Research Methods 53, 1689-1696
    (4th-order Butterworth, 3 Hz).
    """
    fc = effective_lowpass_hz(fs, cfg)
    sos = butterworth(cfg.lowpass_order, fc, fs, "lowpass")
    return filtfilt_blocks(sos, x, context_samples(fc, fs), out=out)
