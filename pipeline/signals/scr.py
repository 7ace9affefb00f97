"""Skin conductance responses (SCRs): found, timed and measured.

Method 'trough_to_peak' (Boucsein et al. 2012): an SCR is a rise of the phasic
component from a trough (its onset) to the next peak. The extrema of the phasic
series are first simplified so that a dip or bump smaller than the minimum
amplitude does not split or create a response (the smallest such wiggle is removed,
repeatedly, which keeps every extremum whose rise or fall is at least that size).
The onset is the foot of the rise (the last sample before the peak that is not yet
rising and lies near the trough). Amplitude is measured on the cleaned skin conductance: the peak
value minus the baseline, the onset value continued with the slope of the second
before the onset (so a drifting tonic level or the recovery of a previous response
neither adds to nor takes from it); rise time is the time from onset to peak,
half-recovery time the time from the peak until the signal is back down to the
onset value + half the amplitude.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.config import ScrSettings
from pipeline.errors import choose

SCR_COLUMNS = ["onset_s", "peak_s", "amplitude_us", "rise_time_s", "half_recovery_s"]

#: After this many vectorised simplification rounds the rest is finished in one
#: sequential pass (rarely reached: each round removes every locally smallest wiggle).
MAX_ROUNDS = 64


@dataclass
class ScrIndices:
    """SCRs on the analysis grid: sample indices and measures."""

    onset: np.ndarray
    peak: np.ndarray
    amplitude_us: np.ndarray
    rise_time_s: np.ndarray
    half_recovery_s: np.ndarray


ScrFn = Callable[[np.ndarray, np.ndarray, np.ndarray, float, ScrSettings], ScrIndices]


def turning_points(x: np.ndarray) -> np.ndarray:
    """Indices of the alternating troughs and peaks of x, its two ends included.

    A step counts as rising when it is positive and as falling otherwise, so a
    plateau after a rise is a peak at its first sample and a plateau before a rise a
    trough at its last sample.
    """
    n = x.size
    if n < 3:
        return np.arange(n)
    rising = x[1:] > x[:-1]
    turns = np.flatnonzero(rising[1:] != rising[:-1]) + 1
    return np.concatenate(([0], turns, [n - 1]))


def _sequential_simplify(v: np.ndarray, keep: np.ndarray, h: float) -> np.ndarray:
    """Finish the simplification one extremum at a time (fallback, small inputs)."""
    idx = list(np.flatnonzero(keep))
    changed = True
    while changed and len(idx) > 3:
        changed = False
        vals = v[idx]
        d = np.abs(np.diff(vals))
        inner = d[1:-1]
        if inner.size == 0:
            break
        j = int(np.argmin(inner)) + 1
        if d[j] < h:
            del idx[j:j + 2]
            changed = True
    out = np.zeros_like(keep)
    out[idx] = True
    return out


def simplify_extrema(v: np.ndarray, h: float) -> np.ndarray:
    """Which alternating extrema survive removing every wiggle smaller than ``h``.

    ``v`` are the values of alternating extrema (trough, peak, ... or peak, trough,
    ...). A pair of neighbours closer than ``h`` whose difference is the smallest
    among its neighbours is removed; this is repeated until no pair is closer than
    ``h``. Removing a locally smallest pair never removes the larger of two peaks or
    the lower of two troughs, so the result is the same as removing the globally
    smallest pair first. The two end points are kept.
    """
    m = v.size
    keep = np.ones(m, dtype=bool)
    if m < 4:
        return keep
    for _ in range(MAX_ROUNDS):
        idx = np.flatnonzero(keep)
        if idx.size < 4:
            return keep
        d = np.abs(np.diff(v[idx]))
        d[0] = d[-1] = np.inf  # pairs touching an end point are never removed
        j = np.arange(1, d.size - 1)  # pairs (j, j+1)
        dj = d[1:-1]
        cand = (dj < h) & (dj <= d[:-2]) & (dj < d[2:])
        if not cand.any():
            return keep
        sel = j[cand]
        keep[idx[sel]] = False
        keep[idx[sel + 1]] = False
    return _sequential_simplify(v, keep, h)


def scrs_by_trough_to_peak(phasic: np.ndarray, cleaned: np.ndarray, valid: np.ndarray,
                           fs: float, cfg: ScrSettings) -> ScrIndices:
    """SCRs as trough-to-peak rises of the phasic component, measured on the cleaned
    skin conductance.

    Parameters
    ----------
    phasic, cleaned : ndarray
        Phasic component and cleaned (gap-free) skin conductance, analysis grid.
    valid : ndarray of bool
        Valid samples; an SCR whose rise touches an invalid sample is dropped, and
        its half-recovery is not searched past one.
    fs : float
        Rate of the analysis grid (Hz).
    cfg : ScrSettings
        ``min_amplitude_us`` (the smallest response, and the smallest dip that
        separates two responses), ``min_rise_time_s`` and ``max_rise_time_s`` (a
        quicker rise is a spike or filter ringing, a slower one a change of tonic
        level) and ``max_half_recovery_s``.

    References
    ----------
    Boucsein, W., Fowles, D. C., Grimnes, S., Ben-Shakhar, G., Roth, W. T., Dawson,
    M. E., & Filion, D. L. (2012). Publication recommendations for electrodermal
    measurements. Psychophysiology 49(8), 1017-1034 (trough-to-peak amplitude; a
    minimum of 0.01 µS for computer scoring).
    Dawson, M. E., Schell, A. M., & Filion, D. L. (2007). The electrodermal system.
    In Handbook of Psychophysiology, 3rd ed. (rise time, half-recovery time).
    """
    h = cfg.min_amplitude_us
    ext = turning_points(phasic)
    keep = simplify_extrema(phasic[ext], h)
    ext = ext[keep]
    v = phasic[ext]
    # rises: an extremum followed by a higher one, not starting at the first sample
    # (onset before the recording) nor ending at the last (not yet at its peak)
    rises = np.flatnonzero(v[1:] > v[:-1])
    rises = rises[ext[rises + 1] < phasic.size - 1]
    trough, peak = ext[rises], ext[rises + 1]
    onset = _rise_start(phasic, trough, peak, h, fs, cfg.max_rise_time_s)
    begun = onset > 0
    trough, peak, onset = trough[begun], peak[begun], onset[begun]
    slope = _baseline_slope(cleaned, onset, np.r_[0, peak[:-1]], fs)
    peak = _refine_peak(cleaned, onset, peak, slope, fs)
    amp = cleaned[peak] - (cleaned[onset] + slope * (peak - onset) / fs)
    bad_cum = np.concatenate(([0], np.cumsum(~valid)))
    touches_invalid = (bad_cum[peak + 1] - bad_cum[onset]) > 0
    rise = (peak - onset) / fs
    quick = (rise <= cfg.max_rise_time_s) & (rise >= cfg.min_rise_time_s)
    upward = cleaned[peak] > cleaned[onset]  # an SCR is a rise of the conductance itself
    ok = (amp >= h) & upward & quick & ~touches_invalid & ((phasic[peak] - phasic[onset]) >= h)
    onset, peak, amp = onset[ok], peak[ok], amp[ok]
    half = _half_recovery(cleaned, valid, onset, peak, amp, fs, cfg.max_half_recovery_s)
    return ScrIndices(onset, peak, amp, (peak - onset) / fs, half)


def _rise_start(ph: np.ndarray, trough: np.ndarray, peak: np.ndarray, h: float, fs: float,
                max_rise_s: float) -> np.ndarray:
    """Where each rise really begins.

    A trough found after merging small wiggles may lie far back in a flat stretch.
    The onset is the last sample between trough and peak that is not yet rising (a
    local minimum, or rising slower than h per second) and still within
    max(10 % of the rise, h / 2) of the trough: the foot of the rise. Searched back
    from the peak over max_rise_s + 1 s; the trough itself if nothing qualifies.
    """
    k = peak.size
    if k == 0:
        return trough
    n = ph.size
    width = int(np.ceil((max_rise_s + 1.0) * fs)) + 1
    thr = ph[trough] + np.maximum(0.1 * (ph[peak] - ph[trough]), h / 2.0)
    back = np.arange(1, width + 1)
    onset = trough.copy()
    chunk = max(1, 1_000_000 // width)
    for a in range(0, k, chunk):
        b = min(k, a + chunk)
        pos = peak[a:b, None] - back[None, :]
        inside = pos >= trough[a:b, None]
        np.clip(pos, 1, n - 2, out=pos)
        here = ph[pos]
        ahead = ph[pos + 1]
        not_rising = (here <= ph[pos - 1]) & (here <= ahead)
        not_rising |= (ahead - here) * fs <= h
        ok = inside & not_rising & (here <= thr[a:b, None])
        first = ok.argmax(axis=1)
        has = ok.any(axis=1)
        onset[a:b] = np.where(has, peak[a:b] - back[first], trough[a:b])
    return onset


#: The peak of the conductance itself is looked for this far around the phasic peak (s).
PEAK_SEARCH_S = (0.5, 1.0)


def _refine_peak(c: np.ndarray, onset: np.ndarray, peak: np.ndarray, slope: np.ndarray,
                 fs: float) -> np.ndarray:
    """The peak on the cleaned conductance above its extrapolated baseline, within
    0.5 s before to 1 s after the phasic peak (a high-pass moves the phasic peak a
    little earlier), never before the onset nor at or past the next onset."""
    k = peak.size
    if k == 0:
        return peak
    n = c.size
    before, after = (int(round(v * fs)) for v in PEAK_SEARCH_S)
    lags = np.arange(-before, after + 1)
    nxt = np.r_[onset[1:], n]
    pos = peak[:, None] + lags[None, :]
    ok = (pos > onset[:, None]) & (pos < nxt[:, None]) & (pos < n)
    pos = np.clip(pos, 0, n - 1)
    above = c[pos] - (c[onset][:, None] + slope[:, None] * (pos - onset[:, None]) / fs)
    above = np.where(ok, above, -np.inf)
    best = above.argmax(axis=1)
    return np.where(ok.any(axis=1), pos[np.arange(k), best], peak)


#: Length of the stretch before an onset whose slope is extrapolated under the rise (s).
BASELINE_S = 1.0


def _baseline_slope(c: np.ndarray, onset: np.ndarray, previous_peak: np.ndarray,
                    fs: float) -> np.ndarray:
    """Least-squares slope (µS/s) of c over the second before each onset, not reaching
    back past the previous response's peak (0 where fewer than 3 samples remain)."""
    k = onset.size
    width = max(3, int(round(BASELINE_S * fs)))
    if k == 0:
        return np.zeros(0)
    lag = np.arange(-width, 1)  # width + 1 samples ending at the onset
    pos = onset[:, None] + lag[None, :]
    use = (pos >= np.maximum(previous_peak, 0)[:, None]) & (pos >= 0)
    pos = np.maximum(pos, 0)
    y = c[pos]
    w = use.astype(float)
    cnt = w.sum(axis=1)
    tx = lag[None, :] * w
    mx = tx.sum(axis=1) / np.maximum(cnt, 1)
    my = (y * w).sum(axis=1) / np.maximum(cnt, 1)
    sxy = ((lag[None, :] - mx[:, None]) * (y - my[:, None]) * w).sum(axis=1)
    sxx = (((lag[None, :] - mx[:, None]) ** 2) * w).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where((cnt >= 3) & (sxx > 0), sxy / sxx * fs, 0.0)
    return slope


def _first_recovery(c: np.ndarray, valid: np.ndarray, peak: np.ndarray, limit: np.ndarray,
                    level: np.ndarray, width: int) -> np.ndarray:
    """Lag (samples, >= 1) of the first sample within ``width`` after each peak, and
    not past its limit, where c <= level; 0 where none, -1 where invalid signal
    comes first."""
    n = c.size
    k = peak.size
    found = np.zeros(k, dtype=np.int64)
    lag = np.arange(1, width + 1)
    chunk = max(1, 1_000_000 // width)  # keep the (SCR x lag) matrices small
    for a in range(0, k, chunk):
        b = min(k, a + chunk)
        pos = peak[a:b, None] + lag[None, :]
        inside = pos <= limit[a:b, None]
        np.minimum(pos, n - 1, out=pos)
        down = inside & (c[pos] <= level[a:b, None])
        broken = inside & ~valid[pos]
        first_down = np.where(down.any(axis=1), down.argmax(axis=1), width)
        first_bad = np.where(broken.any(axis=1), broken.argmax(axis=1), width)
        hit = first_down < first_bad
        found[a:b] = np.where(hit, first_down + 1, np.where(first_bad < width, -1, 0))
    return found


def _half_recovery(c: np.ndarray, valid: np.ndarray, onset: np.ndarray, peak: np.ndarray,
                   amp: np.ndarray, fs: float, horizon_s: float) -> np.ndarray:
    """Seconds from each peak until c falls to onset + amp / 2 (NaN if it does not
    before the horizon, the next onset, invalid signal or the end)."""
    k = onset.size
    out = np.full(k, np.nan)
    if k == 0:
        return out
    n = c.size
    width = max(1, int(np.ceil(horizon_s * fs)))
    limit = np.minimum(np.minimum(peak + width, n - 1), np.r_[onset[1:], n - 1])
    level = c[onset] + amp / 2.0
    # most responses recover within a few seconds: look there first
    short = min(width, max(1, int(np.ceil(4.0 * fs))))
    found = _first_recovery(c, valid, peak, limit, level, short)
    rest = np.flatnonzero((found == 0) & (limit > peak + short))
    if rest.size and width > short:
        found[rest] = _first_recovery(c, valid, peak[rest], limit[rest], level[rest], width)
    ok = found > 0
    out[ok] = found[ok] / fs
    return out


SCR_METHODS: dict[str, ScrFn] = {
    "trough_to_peak": scrs_by_trough_to_peak,  # Boucsein et al. 2012
}


def scr_method(name: str) -> ScrFn:
    return choose(SCR_METHODS, name, "SCR method", " in [signals.scr]")


def score_scrs(phasic: np.ndarray, cleaned: np.ndarray, valid: np.ndarray, fs: float,
               cfg: ScrSettings) -> ScrIndices:
    """Find and measure SCRs with ``cfg.method``."""
    return scr_method(cfg.method)(phasic, cleaned, valid, fs, cfg)


def scr_table(found: ScrIndices, times: np.ndarray) -> pd.DataFrame:
    """The SCR table (one row per SCR, sensor clock) from indices into ``times``."""
    return pd.DataFrame({
        "onset_s": times[found.onset] if found.onset.size else np.zeros(0),
        "peak_s": times[found.peak] if found.peak.size else np.zeros(0),
        "amplitude_us": found.amplitude_us.astype(float),
        "rise_time_s": found.rise_time_s.astype(float),
        "half_recovery_s": found.half_recovery_s.astype(float),
    }, columns=SCR_COLUMNS)
