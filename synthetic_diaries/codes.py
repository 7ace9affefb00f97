"""Second-by-second media codes of one session, and the truth counted from them.

:func:`simulate_session_codes` is the public entry point (the power analysis calls
it with a cohort's :class:`~synthetic_diaries.options.CohortBehaviour`). Everything is
built from a short list of stretches and, inside each, a vectorised list of attention
bouts; per-second arrays are rendered from those lists with ``np.repeat``.

The switch count of the truth (:func:`count_switches`) is computed here from the
generated bout list with the study data contract's rules (CONTRACT §2), independently
of the pipeline's own implementation.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from pipeline.errors import choose
from synthetic_diaries.options import CodingOptions, CohortBehaviour, UncodedOptions

NONE, SINGLE, MULTI = 0, 1, 2
STATE_NAMES = ("none", "single", "multi")

#: Shortest stretch (s) of each kind; a stretch shorter than this is lengthened.
MIN_STRETCH_S = {NONE: 10, SINGLE: 30, MULTI: 30}


# ------------------------------------------------------------------ bout lengths
def lognormal_bouts(mean_s: float, shape: float) -> stats.rv_continuous:
    """Lognormal attention bout lengths with the given mean and log-SD ``shape``.

    A right-skewed length distribution: many short looks and a few long ones, the
    pattern of the gaze-length shares reported for TV and computer use by Brasel &
    Gips (2011) (46.2 % of TV gazes under 1.5 s, 75.8 % under 5 s). The parameter
    values are our scenario's, not fitted to those data.
    """
    median = mean_s * np.exp(-(shape**2) / 2.0)
    return stats.lognorm(s=shape, scale=median)


def gamma_bouts(mean_s: float, shape: float) -> stats.rv_continuous:
    """Gamma attention bout lengths with the given mean and shape ``k``.

    ``k = 1`` gives exponential lengths (a constant hazard of looking away); ``k < 1``
    more very short looks, ``k > 1`` fewer. The parameter values are our scenario's.
    """
    return stats.gamma(a=shape, scale=mean_s / shape)


BOUT_DISTRIBUTIONS: dict[str, Callable[[float, float], stats.rv_continuous]] = {
    "lognormal": lognormal_bouts,
    "gamma": gamma_bouts,
}


def bout_distribution(behaviour: CohortBehaviour, rate_multiplier: float = 1.0):
    """The (continuous) bout-length distribution of a behaviour, before rounding."""
    fn = choose(BOUT_DISTRIBUTIONS, behaviour.bout_distribution, "bout distribution")
    return fn(behaviour.bout_mean_s / rate_multiplier, behaviour.bout_shape)


def _whole_seconds(x: np.ndarray) -> np.ndarray:
    return np.maximum(1, np.rint(x)).astype(np.int64)


def expected_bout_s(behaviour: CohortBehaviour, rate_multiplier: float = 1.0) -> float:
    """Exact mean of the whole-second bout length max(1, round(X))."""
    dist = bout_distribution(behaviour, rate_multiplier)
    top = int(np.ceil(dist.ppf(1 - 1e-12))) + 2
    k = np.arange(1, top + 1, dtype=float)
    upper = dist.cdf(k + 0.5)
    lower = np.where(k == 1, 0.0, dist.cdf(k - 0.5))
    return float(np.sum(k * (upper - lower)))


def design_switch_rate_per_multi_hour(behaviour: CohortBehaviour, max_gap_s: int = 3,
                                      rate_multiplier: float = 1.0) -> float:
    """Switches per multi-platform hour that the behaviour implies inside multi stretches.

    A bout is followed by a gap with probability g (geometric length, mean m, so
    P(length <= max_gap_s) = 1 - (1 - 1/m)^max_gap_s) and then by a bout on another
    platform. Each transition is a switch unless its gap is longer than max_gap_s, so
    the rate is 3600 * P(switch) / E[bout + gap]. Switches at the edges of stretches
    are not included; the generated truth counts them too.
    """
    g, m = behaviour.gap_probability, behaviour.gap_mean_s
    p_long = (1 - 1 / m) ** max_gap_s
    p_switch = 1 - g * p_long
    cycle = expected_bout_s(behaviour, rate_multiplier) + g * m
    return 3600.0 * p_switch / cycle


# ----------------------------------------------------------------- the session
@dataclass
class SessionCodes:
    """One session's codes on the video clock, before any seconds are left uncoded.

    Per-second arrays have length ``duration_s``: ``in_view`` holds an index into
    ``combos`` (the in-view code strings, sorted and ';'-joined), ``attended`` an
    index into ``platforms`` (-1 for nothing attended), ``state`` 0/1/2 for
    none/single/multi. The bout list (``bout_start``, ``bout_end`` exclusive,
    ``bout_platform``) holds the maximal runs of attention as generated.
    """

    duration_s: int
    platforms: list[str]
    combos: list[str]
    combo_members: np.ndarray  # (n_combos, max_members) platform indices, -1 padded
    in_view: np.ndarray
    attended: np.ndarray
    state: np.ndarray
    bout_start: np.ndarray
    bout_end: np.ndarray
    bout_platform: np.ndarray

    def frame(self, attended: np.ndarray | None = None) -> pd.DataFrame:
        """second, in_view, attended as text (the media log's form, '' for none)."""
        att = self.attended if attended is None else attended
        names = np.array(self.platforms + [""], dtype=object)
        return pd.DataFrame({
            "second": np.arange(self.duration_s, dtype=np.int64),
            "in_view": np.array(self.combos, dtype=object)[self.in_view],
            "attended": names[att],  # -1 picks the trailing ''
        })


def _pick(rng: np.random.Generator, weights: dict[str, float], exclude: set[str]) -> str:
    codes = [c for c in sorted(weights) if c not in exclude and weights[c] > 0]
    w = np.array([weights[c] for c in codes], dtype=float)
    return codes[int(rng.choice(len(codes), p=w / w.sum()))]


def _renewal(rng: np.random.Generator, length: int, draw: Callable[[int], tuple[np.ndarray,
             np.ndarray]], per_cycle: float) -> tuple[np.ndarray, np.ndarray]:
    """Starts and ends of bouts (bout, gap, bout, gap ...) filling ``length`` seconds."""
    n = int(length / max(per_cycle, 1.0) * 1.5) + 8
    bouts, gaps = draw(n)
    while (bouts + gaps).sum() < length:  # rare: draw more cycles
        more_b, more_g = draw(n)
        bouts, gaps = np.concatenate([bouts, more_b]), np.concatenate([gaps, more_g])
    cycle_start = np.concatenate([[0], np.cumsum(bouts + gaps)[:-1]])
    keep = cycle_start < length
    start = cycle_start[keep]
    end = np.minimum(start + bouts[keep], length)
    return start, end


def _simulate(rng: np.random.Generator, behaviour: CohortBehaviour, duration_s: int,
              rate_multiplier: float, platforms: list[str]) -> SessionCodes:
    b = behaviour
    pindex = {p: i for i, p in enumerate(platforms)}
    dist = bout_distribution(b, rate_multiplier)
    mean_bout = b.bout_mean_s / rate_multiplier
    combos: dict[str, int] = {}
    combo_lists: list[list[int]] = []

    def combo(codes: list[str]) -> int:
        key = ";".join(sorted(codes))
        if key not in combos:
            combos[key] = len(combo_lists)
            combo_lists.append([pindex[c] for c in sorted(codes)])
        return combos[key]

    stretch_kind, stretch_len, stretch_combo = [], [], []
    b_start, b_end, b_plat = [], [], []
    t = 0
    means = {NONE: b.none_stretch_mean_min, SINGLE: b.single_stretch_mean_min,
             MULTI: b.multi_stretch_mean_min}
    while t < duration_s:
        u = rng.random()
        kind = MULTI if u < b.multi_probability else (
            NONE if u < b.multi_probability + b.none_probability else SINGLE)
        raw = rng.gamma(b.stretch_shape, means[kind] * 60.0 / b.stretch_shape)
        length = min(max(MIN_STRETCH_S[kind], int(round(raw))), duration_s - t)
        if kind == NONE:
            members: list[str] = []
        elif kind == SINGLE:
            members = [_pick(rng, b.single_platforms, set())]
        else:
            anchor = _pick(rng, b.multi_anchors, set())
            members = [anchor, _pick(rng, b.multi_companions, {anchor})]
            spare = set(b.multi_companions) - set(members)
            if spare and rng.random() < b.third_platform_probability:
                members.append(_pick(rng, b.multi_companions, set(members)))
        stretch_kind.append(kind)
        stretch_len.append(length)
        stretch_combo.append(combo(members))

        if kind == SINGLE:
            p = pindex[members[0]]
            if b.lookaway_rate_per_min > 0:
                on_mean = 60.0 / b.lookaway_rate_per_min

                def draw(n: int) -> tuple[np.ndarray, np.ndarray]:
                    return (_whole_seconds(rng.exponential(on_mean, n)),
                            rng.geometric(1.0 / b.lookaway_mean_s, n).astype(np.int64))

                s, e = _renewal(rng, length, draw, on_mean + b.lookaway_mean_s)
            else:
                s, e = np.array([0]), np.array([length])
            plats = np.full(len(s), p, dtype=np.int64)
        elif kind == MULTI:
            def draw(n: int) -> tuple[np.ndarray, np.ndarray]:
                bouts = _whole_seconds(dist.rvs(size=n, random_state=rng))
                has_gap = rng.random(n) < b.gap_probability
                gaps = np.where(has_gap, rng.geometric(1.0 / b.gap_mean_s, n), 0)
                return bouts, gaps.astype(np.int64)

            s, e = _renewal(rng, length, draw, mean_bout + b.gap_probability * b.gap_mean_s)
            idx = np.array([pindex[m] for m in members], dtype=np.int64)
            k = len(idx)
            first = rng.integers(k)
            steps = rng.integers(1, k, size=len(s))
            pos = (first + np.concatenate([[0], np.cumsum(steps[:-1])])) % k
            plats = idx[pos]
        else:
            s = e = plats = np.array([], dtype=np.int64)
        b_start.append(s + t)
        b_end.append(e + t)
        b_plat.append(plats)
        t += length

    lengths = np.array(stretch_len, dtype=np.int64)
    in_view = np.repeat(np.array(stretch_combo, dtype=np.int64), lengths)
    state = np.repeat(np.array(stretch_kind, dtype=np.int8), lengths)
    start = np.concatenate(b_start).astype(np.int64)
    end = np.concatenate(b_end).astype(np.int64)
    plat = np.concatenate(b_plat).astype(np.int64)
    start, end, plat = merge_touching(start, end, plat)
    attended = render_bouts(duration_s, start, end, plat)

    width = max([len(m) for m in combo_lists] + [1])
    members_arr = np.full((len(combo_lists), width), -1, dtype=np.int64)
    for i, m in enumerate(combo_lists):
        members_arr[i, :len(m)] = m
    return SessionCodes(duration_s=duration_s, platforms=list(platforms),
                        combos=list(combos), combo_members=members_arr, in_view=in_view,
                        attended=attended, state=state, bout_start=start, bout_end=end,
                        bout_platform=plat)


def merge_touching(start: np.ndarray, end: np.ndarray, plat: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Merge consecutive bouts on the same platform with no second between them.

    Such bouts arise where a stretch ends and the next begins on the same platform;
    on the per-second codes they are one maximal run, hence one bout.
    """
    if len(start) < 2:
        return start, end, plat
    joined = (start[1:] == end[:-1]) & (plat[1:] == plat[:-1])
    first = np.concatenate([[True], ~joined])
    group_first = np.flatnonzero(first)
    group_last = np.append(group_first[1:] - 1, len(start) - 1)
    return start[group_first], end[group_last], plat[group_first]


def render_bouts(duration_s: int, start: np.ndarray, end: np.ndarray, plat: np.ndarray
                 ) -> np.ndarray:
    """Per-second attended platform index (-1 for none) from a bout list.

    Later bouts overwrite earlier ones where they overlap.
    """
    out = np.full(duration_s, -1, dtype=np.int64)
    lengths = np.clip(end - start, 0, None)
    if lengths.sum() == 0:
        return out
    offsets = np.cumsum(lengths) - lengths
    pos = np.arange(lengths.sum()) - np.repeat(offsets - start, lengths)
    out[pos] = np.repeat(plat, lengths)
    return out


def simulate_session_codes(rng: np.random.Generator, behaviour: CohortBehaviour,
                           duration_s: int, *, rate_multiplier: float = 1.0) -> pd.DataFrame:
    """Simulate one fully coded session of a cohort's media use.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of randomness (the result is a function of its state).
    behaviour : CohortBehaviour
        The cohort's behaviour object: stretch probabilities and lengths, the bout
        distribution in multi-platform time, gaps, look-aways and platform weights
        (see :class:`~synthetic_diaries.options.CohortBehaviour`).
    duration_s : int
        Session length in seconds.
    rate_multiplier : float, optional
        A participant's switch-rate multiplier: bout lengths in multi-platform time
        are divided by it (1 = the cohort's typical participant).

    Returns
    -------
    DataFrame
        One row per second 0..duration_s-1: ``second``, ``in_view`` (sorted codes
        ';'-joined, '' for none) and ``attended`` ('' for none, else one of in_view).
        Every second is coded; uncoded stretches are a property of a study's coding,
        not of behaviour.
    """
    platforms = sorted(behaviour.platforms())
    return _simulate(rng, behaviour, int(duration_s), rate_multiplier, platforms).frame()


# --------------------------------------------------------------- uncoded, coder b
def draw_uncoded(rng: np.random.Generator, duration_s: int, opts: UncodedOptions
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Sorted, disjoint uncoded stretches [start, end) of a session, each >= min_s long."""
    n = rng.poisson(opts.rate_per_hour * duration_s / 3600.0)
    if n == 0 or duration_s <= opts.min_s:
        return np.array([], dtype=np.int64), np.array([], dtype=np.int64)
    lengths = opts.min_s + np.rint(rng.exponential(opts.mean_s - opts.min_s, n)).astype(np.int64)
    lengths = np.minimum(lengths, duration_s)
    starts = np.floor(rng.random(n) * (duration_s - lengths + 1)).astype(np.int64)
    order = np.argsort(starts, kind="stable")
    starts, ends = starts[order], starts[order] + lengths[order]
    # merge overlapping or touching stretches
    run_end = np.maximum.accumulate(ends)
    new = np.concatenate([[True], starts[1:] > run_end[:-1]])
    first = np.flatnonzero(new)
    last = np.append(first[1:] - 1, len(starts) - 1)
    return starts[first], run_end[last]


def uncoded_mask(duration_s: int, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """True on seconds inside the uncoded stretches."""
    edges = np.zeros(duration_s + 1, dtype=np.int64)
    np.add.at(edges, starts, 1)
    np.add.at(edges, ends, -1)
    return np.cumsum(edges[:-1]) > 0


def second_coder(rng: np.random.Generator, codes: SessionCodes, opts: CodingOptions
                 ) -> np.ndarray:
    """The second coder's attended codes: jittered bout boundaries and random slips.

    Each bout's start and end move by a uniform whole number of seconds within
    +/- ``boundary_jitter_s``; a second where the result is not in view keeps the
    first coder's code. Then a ``disagreement_share`` of seconds gets a random choice
    among the platforms in view and nothing attended.
    """
    j = opts.boundary_jitter_s
    n = len(codes.bout_start)
    start = np.clip(codes.bout_start + rng.integers(-j, j + 1, n), 0, codes.duration_s)
    end = np.clip(codes.bout_end + rng.integers(-j, j + 1, n), 0, codes.duration_s)
    att = render_bouts(codes.duration_s, start, np.maximum(end, start), codes.bout_platform)
    members = codes.combo_members[codes.in_view]  # (D, width)
    in_view_ok = (att == -1) | (members == att[:, None]).any(axis=1)
    att = np.where(in_view_ok, att, codes.attended)
    slip = rng.random(codes.duration_s) < opts.disagreement_share
    if slip.any():
        k = (members[slip] >= 0).sum(axis=1)
        choice = np.floor(rng.random(slip.sum()) * (k + 1)).astype(np.int64)
        picked = members[slip][np.arange(slip.sum()), np.minimum(choice, members.shape[1] - 1)]
        att[slip] = np.where(choice < k, picked, -1)
    return att


# --------------------------------------------------------------------- the truth
def count_switches(bout_start: np.ndarray, bout_end: np.ndarray, bout_platform: np.ndarray,
                   uncoded_start: np.ndarray, uncoded_end: np.ndarray, *,
                   max_gap_s: int = 3, min_bout_s: int = 1) -> tuple[int, np.ndarray]:
    """Switches of a session by the study data contract's definition (CONTRACT §2).

    Bouts are cut by the uncoded stretches (a bout is a run of *coded* seconds); bouts
    shorter than ``min_bout_s`` are dropped and their seconds count as unattended; a
    switch is a bout on X followed by the next bout, on Y != X, with at most
    ``max_gap_s`` seconds between them, all of them coded (an uncoded second between
    two bouts leaves it unknown what happened, so it is no switch).

    Returns the count and the second of each switch (first second of the bout entered).
    """
    start, end, plat = (np.asarray(a, dtype=np.int64)
                        for a in (bout_start, bout_end, bout_platform))
    for u0, u1 in zip(np.asarray(uncoded_start), np.asarray(uncoded_end)):
        hit = (start < u1) & (end > u0)
        if not hit.any():
            continue
        left = hit & (start < u0)    # keeps [start, u0)
        right = hit & (end > u1)     # keeps [u1, end)
        start = np.concatenate([start[~hit], start[left], np.full(right.sum(), u1)])
        end_new = np.concatenate([end[~hit], np.full(left.sum(), u0), end[right]])
        plat = np.concatenate([plat[~hit], plat[left], plat[right]])
        order = np.argsort(start, kind="stable")
        start, end, plat = start[order], end_new[order], plat[order]
    long_enough = (end - start) >= min_bout_s
    start, end, plat = start[long_enough], end[long_enough], plat[long_enough]
    if len(start) < 2:
        return 0, np.array([], dtype=np.int64)
    segment = np.searchsorted(np.asarray(uncoded_end, dtype=np.int64), start, side="right")
    gap = start[1:] - end[:-1]
    is_switch = ((plat[1:] != plat[:-1]) & (gap <= max_gap_s) & (gap >= 0)
                 & (segment[1:] == segment[:-1]))
    return int(is_switch.sum()), start[1:][is_switch]
