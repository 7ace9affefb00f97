"""Invalid-sample rules for skin conductance, and what happens to what they find.

Each rule is one function of the raw skin conductance on the uniform grid (and the
accelerometer, where present) with its own threshold in ``[signals.eda]``; each
returns a boolean mask of the samples it marks invalid, and its share is reported in
QC. The masks are then combined (:func:`assess`):

* a stretch no longer than ``max_interp_s`` whose neighbours can be joined by a line
  no steeper than the jump limit is a glitch: it is bridged by linear interpolation
  and counts as valid;
* every other stretch stays invalid and is widened by ``pad_s`` on both sides, the
  transitional data around an artifact (Kleckner et al. 2018, rule 4).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from pipeline.config import EdaSettings
from pipeline.errors import ConfigError
from pipeline.signals.runs import fill_linear, mask_from_runs, merge_runs, runs_of


@dataclass
class RawEda:
    """The raw skin conductance on the grid, with what the rules share."""

    x: np.ndarray  # µS, NaN where there is no sample
    fs: float
    motion_g: np.ndarray | None = None  # |accelerometer magnitude - 1 g| per sample

    @cached_property
    def step(self) -> np.ndarray:
        """Absolute change between successive samples (µS), length n - 1."""
        d = np.diff(self.x)
        return np.abs(d, out=d)

    def held_runs(self, tol: float) -> tuple[np.ndarray, np.ndarray]:
        """Maximal runs of samples [start, end) whose successive changes are all within
        ``tol`` (a run of one sample is not listed)."""
        cached = self.__dict__.setdefault("_held", {})
        if tol not in cached:
            with np.errstate(invalid="ignore"):
                still = self.step <= tol  # step i joins samples i and i+1
            s, e = runs_of(still)
            cached[tol] = (s, e + 1)
        return cached[tol]


RuleFn = Callable[[RawEda, EdaSettings], np.ndarray]


def out_of_range(raw: RawEda, cfg: EdaSettings) -> np.ndarray:
    """Samples that cannot be skin conductance: non-positive, below ``min_us`` or above
    ``max_us``.

    References
    ----------
    Kleckner, I. R., Jones, R. M., Wilder-Smith, O., Wormwood, J. B., Akcakaya, M.,
    Quigley, K. S., Lord, C., & Goodwin, M. S. (2018). Simple, transparent, and flexible
    automated quality assessment procedures for ambulatory electrodermal activity data.
    IEEE Transactions on Biomedical Engineering 65(7), 1460-1467 (rule 1: 0.05-60 µS).
    """
    x = raw.x
    lowest = cfg.min_us if cfg.min_us > 0 else np.nextafter(0.0, 1.0)
    with np.errstate(invalid="ignore"):
        out = x < lowest
        out |= x > cfg.max_us
    return out


def jump(raw: RawEda, cfg: EdaSettings) -> np.ndarray:
    """Both samples of every step faster than ``max_slope_us_per_s`` (either sign).

    The slope is the change between successive samples of the grid times its rate.

    References
    ----------
    Kleckner et al. (2018), IEEE Trans Biomed Eng 65(7), 1460-1467 (rule 2: EDA that
    changes faster than +-10 µS/s).
    """
    with np.errstate(invalid="ignore"):
        steep = raw.step > cfg.max_slope_us_per_s / raw.fs
    out = np.empty(raw.x.size, dtype=bool)
    out[:-1] = steep
    out[-1] = False
    out[1:] |= steep
    return out


def _run_extremes(x: np.ndarray, s: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Max and min of x over each run [s, e) (runs disjoint, sorted, non-empty)."""
    last = e - 1  # inclusive end, always < x.size
    bounds = np.empty(2 * s.size, dtype=np.int64)
    bounds[0::2], bounds[1::2] = s, last
    hi = np.maximum.reduceat(x, bounds)[0::2]  # over [s, last)
    lo = np.minimum.reduceat(x, bounds)[0::2]
    one = s == last  # a run of one sample: reduceat gave x[s]
    hi = np.where(one, x[s], np.maximum(hi, x[last]))
    lo = np.where(one, x[s], np.minimum(lo, x[last]))
    return hi, lo


def flat_line(raw: RawEda, cfg: EdaSettings) -> np.ndarray:
    """Stretches of at least ``flat_window_s`` whose range stays within
    ``flat_tolerance_us``: a sensor that is off or has lost contact.

    A stretch is a maximal run of samples whose successive changes are within the
    tolerance; it is flagged when it is long enough and its whole range (max - min)
    is within the tolerance too, so a slow genuine drift is never a flat line.
    """
    tol = cfg.flat_tolerance_us
    n = raw.x.size
    s, e = raw.held_runs(tol)
    long = (e - s) >= int(np.ceil(cfg.flat_window_s * raw.fs))
    s, e = s[long], e[long]
    if s.size == 0:
        return np.zeros(n, dtype=bool)
    hi, lo = _run_extremes(raw.x, s, e)
    flat = (hi - lo) <= tol
    return mask_from_runs(s[flat], e[flat], n)


#: With no declared ceiling, the highest held level is the sensor's ceiling only if
#: at most this share of samples lies above it (a few spikes may; real data may not).
AUTO_CEILING_MAX_ABOVE = 1e-3


def clipping(raw: RawEda, cfg: EdaSettings) -> np.ndarray:
    """Readings held at the sensor's ceiling for ``clip_min_s`` or longer.

    A held reading is a run whose successive changes stay within
    ``flat_tolerance_us``. The ceiling is ``ceiling_us``; when unset, it is the
    highest level held that long, provided hardly any sample (at most 0.1 %, a few
    spikes) lies above it. A genuine SCR peak is a turning point, never held for
    seconds (common practice).
    """
    tol = cfg.flat_tolerance_us
    x = raw.x
    n = x.size
    s, e = raw.held_runs(tol)
    long = (e - s) >= int(np.ceil(cfg.clip_min_s * raw.fs))
    s, e = s[long], e[long]
    if s.size == 0:
        return np.zeros(n, dtype=bool)
    level = x[s]
    if cfg.ceiling_us is not None:
        ceiling = cfg.ceiling_us
    else:
        ceiling = float(level.max())
        with np.errstate(invalid="ignore"):
            above = np.count_nonzero(x > ceiling + tol)
        if above > AUTO_CEILING_MAX_ABOVE * n:
            return np.zeros(n, dtype=bool)
    at = level >= ceiling - tol
    return mask_from_runs(s[at], e[at], n)


def motion(raw: RawEda, cfg: EdaSettings) -> np.ndarray:
    """Samples where the accelerometer magnitude, averaged over ``motion_window_s``,
    deviates from 1 g by more than ``motion_max_g`` (no accelerometer: none).

    Sample i is judged on the w samples from max(i - w // 2, 0) on (fewer at the end of
    the recording), missing samples left out.
    """
    n = raw.x.size
    if raw.motion_g is None:
        return np.zeros(n, dtype=bool)
    m = raw.motion_g
    have = np.isfinite(m)
    w = max(1, int(round(cfg.motion_window_s * raw.fs)))
    half = w // 2
    # The first half + 1 samples share the window that starts at 0; after that each
    # sample has its own. So the test runs once per window start 0 .. n_starts - 1 and
    # every sample takes the verdict of its window.
    n_starts = max(n - half, 1)
    # Window sums from running totals: run_count[k] is how many of the first k
    # samples are present, run[k] their sum (a missing sample counts as 0).
    run_count = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(have, out=run_count[1:])
    count = _window_sums(run_count, w, n_starts)
    del run_count
    run = np.zeros(n + 1)
    np.copyto(run[1:], m, where=have)
    np.cumsum(run[1:], out=run[1:])
    total = _window_sums(run, w, n_starts)
    del run
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.divide(total, count, out=total)
    verdict = mean > cfg.motion_max_g
    verdict &= count > 0
    flagged = np.empty(n, dtype=bool)
    flagged[: half + 1] = verdict[0]
    flagged[half + 1:] = verdict[1:]
    return flagged


def _window_sums(run: np.ndarray, w: int, n_starts: int) -> np.ndarray:
    """Sum of the w values from s on (fewer at the end), s = 0 .. n_starts - 1, from
    their running totals ``run`` (``run[k]``: the sum of the first k values).

    Each sum is a difference of two running totals, taken on slices so that no
    index arrays are needed.
    """
    n = run.size - 1
    out = np.empty(n_starts, dtype=run.dtype)
    # windows s < whole lie inside the values; the later ones are cut at their end
    whole = min(n_starts, max(n - w + 1, 0))
    np.subtract(run[w: w + whole], run[:whole], out=out[:whole])
    np.subtract(run[n], run[whole:n_starts], out=out[whole:])
    return out


ARTIFACT_RULES: dict[str, RuleFn] = {
    "out_of_range": out_of_range,  # Kleckner et al. 2018, rule 1
    "flat_line": flat_line,        # common practice
    "jump": jump,                  # Kleckner et al. 2018, rule 2
    "clipping": clipping,          # common practice
    "motion": motion,              # common practice
}


@dataclass
class Validity:
    """What the rules found, and what became of it."""

    invalid: np.ndarray  # final mask: flagged, not bridged, padded
    repaired: tuple[np.ndarray, np.ndarray]  # runs bridged by interpolation (valid)
    masked: tuple[np.ndarray, np.ndarray]  # merged, padded invalid runs
    shares: dict[str, float] = field(default_factory=dict)


def _rule(name: str) -> RuleFn:
    try:
        return ARTIFACT_RULES[name]
    except KeyError:
        raise ConfigError(f"unknown artifact rule {name!r}",
                          hint=f"choose from {', '.join(ARTIFACT_RULES)}") from None


def assess(raw: RawEda, cfg: EdaSettings, max_interp_s: float) -> Validity:
    """Run the enabled rules, bridge short glitches, pad and merge the rest.

    Returns
    -------
    Validity
        ``shares`` holds, for each rule and for ``missing`` (no sample), the share of
        grid samples it flagged, plus ``interpolated`` (bridged, valid again),
        ``transition`` (added by padding) and ``total`` (the final invalid share).
    """
    x = raw.x
    n = x.size
    bad = np.isnan(x)
    total = max(n, 1)
    shares = {"missing": np.count_nonzero(bad) / total}
    for name in cfg.rules:
        flagged = _rule(name)(raw, cfg)
        shares[name] = np.count_nonzero(flagged) / total
        bad |= flagged
        del flagged
    s, e = runs_of(bad)
    length = e - s
    short = (length + 1) <= max_interp_s * raw.fs + 1e-9  # k samples span k + 1 steps
    interior = (s > 0) & (e < n)
    left = x[np.maximum(s - 1, 0)]
    right = x[np.minimum(e, n - 1)]
    with np.errstate(invalid="ignore"):
        gentle = np.abs(right - left) * raw.fs / (length + 1) <= cfg.max_slope_us_per_s
    repair = short & interior & gentle
    rs, re_ = s[repair], e[repair]
    pad = int(round(cfg.pad_s * raw.fs))
    ms = np.maximum(s[~repair] - pad, 0)
    me = np.minimum(e[~repair] + pad, n)
    ms, me = merge_runs(ms, me)
    invalid = mask_from_runs(ms, me, n)
    if n:
        shares["interpolated"] = float((re_ - rs).sum() / n)
        flagged_kept = float((e[~repair] - s[~repair]).sum() / n)
        shares["total"] = np.count_nonzero(invalid) / n
        shares["transition"] = max(0.0, shares["total"] - flagged_kept)
    else:
        shares.update(interpolated=0.0, total=0.0, transition=0.0)
    return Validity(invalid=invalid, repaired=(rs, re_), masked=(ms, me), shares=shares)


def bridged(x: np.ndarray, validity: Validity, in_place: bool = False) -> np.ndarray:
    """A gap-free copy of ``x`` for filtering: glitches and invalid stretches replaced
    by straight lines between their neighbours (the invalid ones stay masked later).
    With ``in_place=True`` ``x`` itself is filled and returned (no copy)."""
    out = x if in_place else np.array(x, dtype=float, copy=True)
    fill_linear(out, *validity.repaired)
    fill_linear(out, *validity.masked)
    return out
