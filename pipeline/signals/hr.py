"""Heart rate from an inter-beat-interval stream or from heart-rate samples.

Beats (``ibi_ms``: one interval per beat, at the time of the beat that ends it) or
heart-rate samples (``hr_bpm``) are checked by two rules: a plausible range, and a
published successive-difference rule (``[signals.hr] artifact_method``). Valid values
are then put on the recording's grid: an interval's heart rate holds from the beat
that starts it to the beat that ends it, and gaps left by excluded intervals are
bridged when no longer than ``max_interp_s``; samples are interpolated linearly
across their own spacing plus at most ``max_interp_s``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from pipeline.config import HrSettings
from pipeline.errors import choose
from pipeline.signals.grid import interp_within
from pipeline.signals.runs import fill_linear, runs_of

ArtifactFn = Callable[[np.ndarray, HrSettings], np.ndarray]


def _both_neighbours(deviates_prev: np.ndarray, deviates_next: np.ndarray) -> np.ndarray:
    """An interval is an artifact when it deviates from both neighbours (from its only
    neighbour at either end): an ectopic beat and its compensatory pause are caught,
    the normal intervals around them are not. Each rule also applies its limit
    against the running median of the 11 surrounding intervals, which catches a run
    of two similar artifacts (an interval split by an extra beat)."""
    n = deviates_prev.size + 1
    out = np.zeros(n, dtype=bool)
    if n < 2:
        return out
    out[1:-1] = deviates_prev[:-1] & deviates_next[1:]
    out[0] = deviates_next[0]
    out[-1] = deviates_prev[-1]
    return out


#: Intervals in the running median that serves as the local reference.
LOCAL_BEATS = 11


def _local_reference(ibi_ms: np.ndarray) -> np.ndarray:
    """Running median of the surrounding intervals: the local normal interval."""
    size = min(LOCAL_BEATS, ibi_ms.size if ibi_ms.size % 2 else ibi_ms.size - 1)
    return ndimage.median_filter(ibi_ms, size=max(1, size), mode="nearest")


def ectopic_by_relative_change(ibi_ms: np.ndarray, cfg: HrSettings) -> np.ndarray:
    """Intervals that differ by more than ``malik_max_change`` (20 %) from both
    neighbours, or from the running median of the surrounding intervals.

    ``deviates_prev[i]`` compares interval i+1 with interval i, relative to interval
    i, as in the rule's usual statement |RR(i+1) - RR(i)| > 0.2 RR(i).

    References
    ----------
    Malik, M., Farrell, T., Cripps, T., & Camm, A. J. (1989). Heart rate variability in
    relation to prognosis after myocardial infarction: selection of optimal processing
    techniques. European Heart Journal 10(12), 1060-1074 (from memory). The 20 % rule
    as cited by the Task Force of the ESC and NASPE (1996), Eur Heart J 17, 354-381.
    """
    if ibi_ms.size < 2:
        return np.zeros(ibi_ms.size, dtype=bool)
    change = np.abs(np.diff(ibi_ms))
    dev_prev = change > cfg.malik_max_change * ibi_ms[:-1]  # interval i+1 vs i
    dev_next = change > cfg.malik_max_change * ibi_ms[1:]   # interval i vs i+1
    ref = _local_reference(ibi_ms)
    off_local = np.abs(ibi_ms - ref) > cfg.malik_max_change * ref
    return _both_neighbours(dev_prev, dev_next) | off_local


def berntson_criterion(ibi_ms: np.ndarray) -> float:
    """Criterion beat difference of Berntson et al. (1990).

    QD = (Q3 - Q1) / 2 of the intervals; maximum expected difference MED = 3.32 QD;
    minimal artifact difference MAD = (median - 2.9 QD) / 3; criterion (MED + MAD) / 2.
    """
    q1, med, q3 = np.percentile(ibi_ms, [25, 50, 75])
    qd = (q3 - q1) / 2.0
    return float((3.32 * qd + (med - 2.9 * qd) / 3.0) / 2.0)


def ectopic_by_berntson(ibi_ms: np.ndarray, cfg: HrSettings) -> np.ndarray:
    """Intervals whose differences from both neighbours (or from the running median of
    the surrounding intervals) exceed the criterion beat difference computed from the
    series' own quartiles.

    References
    ----------
    Berntson, G. G., Quigley, K. S., Jang, J. F., & Boysen, S. T. (1990). An approach
    to artifact identification: application to heart period data. Psychophysiology
    27(5), 586-598.
    """
    if ibi_ms.size < 4:
        return np.zeros(ibi_ms.size, dtype=bool)
    crit = berntson_criterion(ibi_ms)
    change = np.abs(np.diff(ibi_ms))
    big = change > crit
    off_local = np.abs(ibi_ms - _local_reference(ibi_ms)) > crit
    return _both_neighbours(big, big) | off_local


HR_ARTIFACT_METHODS: dict[str, ArtifactFn] = {
    "malik": ectopic_by_relative_change,  # Malik et al. 1989; Task Force 1996
    "berntson": ectopic_by_berntson,      # Berntson et al. 1990
}


def hr_artifact_method(name: str) -> ArtifactFn:
    return choose(HR_ARTIFACT_METHODS, name, "heart-rate artifact method", " in [signals.hr]")


@dataclass
class HeartRate:
    hr_bpm: np.ndarray  # on the grid, NaN where invalid
    valid: np.ndarray
    shares: dict[str, float] = field(default_factory=dict)
    source: str = ""


def flag_intervals(ibi_ms: np.ndarray, cfg: HrSettings) -> tuple[np.ndarray, np.ndarray]:
    """Masks (out of range, successive-difference artifact) over the intervals.

    The successive-difference rule runs on the in-range intervals only, so one
    impossible value does not condemn its neighbours.
    """
    lo, hi = 60000.0 / cfg.max_bpm, 60000.0 / cfg.min_bpm
    out_of_range = ~((ibi_ms >= lo) & (ibi_ms <= hi))
    ectopic = np.zeros(ibi_ms.size, dtype=bool)
    ok = np.flatnonzero(~out_of_range)
    ectopic[ok] = hr_artifact_method(cfg.artifact_method)(ibi_ms[ok], cfg)
    return out_of_range, ectopic


def heart_rate(time_s: np.ndarray, channels: dict[str, np.ndarray], grid_t: np.ndarray,
               fs: float, cfg: HrSettings, max_interp_s: float) -> HeartRate | None:
    """Heart rate on the grid (times ``grid_t``, rate ``fs``) from ``ibi_ms``
    (preferred) or ``hr_bpm``; None if the recording has neither."""
    if "ibi_ms" in channels and np.isfinite(channels["ibi_ms"]).any():
        return _from_intervals(time_s, channels["ibi_ms"], grid_t, fs, cfg, max_interp_s)
    if "hr_bpm" in channels and np.isfinite(channels["hr_bpm"]).any():
        return _from_samples(time_s, channels["hr_bpm"], grid_t, cfg, max_interp_s)
    return None


def _shares(out_of_range: np.ndarray, ectopic: np.ndarray) -> dict[str, float]:
    k = max(out_of_range.size, 1)
    return {"hr_out_of_range": float(out_of_range.sum() / k),
            "hr_successive_difference": float(ectopic.sum() / k)}


def _from_intervals(time_s: np.ndarray, ibi: np.ndarray, grid_t: np.ndarray, fs: float,
                    cfg: HrSettings, max_interp_s: float) -> HeartRate:
    have = np.isfinite(ibi)
    beat_t, ibi_ms = time_s[have], ibi[have]
    out_of_range, ectopic = flag_intervals(ibi_ms, cfg)
    good = ~(out_of_range | ectopic)
    # grid point t lies in the interval of the first beat at or after it
    k = np.searchsorted(beat_t, grid_t, side="left")
    kk = np.minimum(k, beat_t.size - 1)
    inside = (k < beat_t.size) & (grid_t > beat_t[kk] - ibi_ms[kk] / 1000.0 - 1e-9)
    hr = np.full(grid_t.size, np.nan)
    use = inside & good[kk]
    hr[use] = 60000.0 / ibi_ms[kk[use]]
    # bridge short runs without a valid interval (an excluded ectopic beat)
    s, e = runs_of(~np.isfinite(hr))
    short = ((e - s + 1) <= max_interp_s * fs + 1e-9) & (s > 0) & (e < hr.size)
    fill_linear(hr, s[short], e[short])
    shares = _shares(out_of_range, ectopic)
    valid = np.isfinite(hr)
    shares["hr_total"] = float(1.0 - valid.mean()) if valid.size else 0.0
    return HeartRate(hr, valid, shares, "ibi_ms")


def _from_samples(time_s: np.ndarray, hr_bpm: np.ndarray, grid_t: np.ndarray,
                  cfg: HrSettings, max_interp_s: float) -> HeartRate:
    have = np.isfinite(hr_bpm)
    t, v = time_s[have], hr_bpm[have]
    with np.errstate(divide="ignore"):
        ibi_equiv = np.where(v > 0, 60000.0 / np.where(v > 0, v, 1.0), np.inf)
    out_of_range, ectopic = flag_intervals(ibi_equiv, cfg)
    good = ~(out_of_range | ectopic)
    # samples are joined across their own spacing plus at most max_interp_s
    spacing = float(np.median(np.diff(t))) if t.size > 1 else 0.0
    hr = interp_within(grid_t, t[good], v[good], spacing + max_interp_s)
    shares = _shares(out_of_range, ectopic)
    valid = np.isfinite(hr)
    shares["hr_total"] = float(1.0 - valid.mean()) if valid.size else 0.0
    return HeartRate(hr, valid, shares, "hr_bpm")
