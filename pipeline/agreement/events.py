"""Agreement on switch events: one-to-one matching of two coders' switches in time.

A switch of coder B *matches* a switch of coder A when both go from the same platform
to the same platform and their times differ by at most ``tolerance_s`` seconds
(inclusive). Each switch takes part in at most one match. Coder A is the reference:

* precision = matched / switches of B (how many of B's switches A also saw),
* recall    = matched / switches of A (how many of A's switches B also saw),
* F1        = 2 * matched / (switches of A + switches of B).

Two matching rules are offered (``[agreement] switch_matching``):

* ``optimal`` (default): the matching with the most pairs, and among those the
  smallest total time difference (an assignment problem, solved exactly).
* ``greedy``: pairs taken closest first (ties: earlier A switch, then earlier B
  switch), skipping switches already used. Simple and common, but it can pair fewer
  switches than possible when a close pair blocks two slightly further ones.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from pipeline.errors import choose, ConfigError

#: Columns a table of switch events must have (one row per switch).
EVENT_COLUMNS = ("time_s", "from_platform", "to_platform")

#: Columns of the table of matched pairs.
MATCH_COLUMNS = ("index_a", "index_b", "time_a_s", "time_b_s", "offset_s",
                 "from_platform", "to_platform")


@dataclass(frozen=True)
class SwitchAgreement:
    """Counts and rates of one comparison of two coders' switches."""

    switches_a: int
    switches_b: int
    matched: int
    precision: float
    recall: float
    f1: float
    pairs: pd.DataFrame  # one row per matched pair, MATCH_COLUMNS


def candidate_pairs(a: pd.DataFrame, b: pd.DataFrame, tolerance_s: float) -> pd.DataFrame:
    """Every (A switch, B switch) pair that *could* match: same platforms, close in time.

    Returns positional indices ``ia``, ``ib`` (rows of ``a`` and ``b``) and the absolute
    time difference ``distance_s``, one row per candidate pair.
    """
    empty = pd.DataFrame({"ia": pd.Series(dtype=np.int64), "ib": pd.Series(dtype=np.int64),
                          "distance_s": pd.Series(dtype=float)})
    if len(a) == 0 or len(b) == 0:
        return empty
    # a switch's kind is its (from, to) pair of platforms, numbered the same for A and B
    froms, _ = pd.factorize(np.concatenate([a["from_platform"].astype(str).to_numpy(),
                                            b["from_platform"].astype(str).to_numpy()]))
    tos, to_names = pd.factorize(np.concatenate([a["to_platform"].astype(str).to_numpy(),
                                                 b["to_platform"].astype(str).to_numpy()]))
    kind_code = froms.astype(np.int64) * len(to_names) + tos
    ka, kb = kind_code[: len(a)], kind_code[len(a):]
    ta = a["time_s"].to_numpy(dtype=float)
    tb = b["time_s"].to_numpy(dtype=float)
    # one axis for all kinds: kinds are placed further apart than any tolerance reaches
    span = float(max(ta.max(), tb.max()) - min(ta.min(), tb.min())) + 2.0 * tolerance_s + 1.0
    xa = ka * span + (ta - ta.min())
    xb = kb * span + (tb - ta.min())
    order = np.argsort(xa, kind="stable")
    xs = xa[order]
    lo = np.searchsorted(xs, xb - tolerance_s, side="left")
    hi = np.searchsorted(xs, xb + tolerance_s, side="right")
    n_each = hi - lo
    if n_each.sum() == 0:
        return empty
    ib = np.repeat(np.arange(len(b)), n_each)
    offsets = np.arange(n_each.sum()) - np.repeat(np.cumsum(n_each) - n_each, n_each)
    ia = order[np.repeat(lo, n_each) + offsets]
    same = ka[ia] == kb[ib]
    dist = np.abs(ta[ia] - tb[ib])
    keep = same & (dist <= tolerance_s)
    return pd.DataFrame({"ia": ia[keep].astype(np.int64), "ib": ib[keep].astype(np.int64),
                         "distance_s": dist[keep]})


def match_optimal(cand: pd.DataFrame, n_a: int, n_b: int) -> pd.DataFrame:
    """Maximum one-to-one matching with the least total time difference.

    The candidate graph is split into connected groups; each group is an assignment
    problem solved exactly by the Hungarian-type algorithm of
    :func:`scipy.optimize.linear_sum_assignment`. A non-candidate pair costs more than
    any full set of candidate pairs could, so the solver first maximises the number
    of matches and then minimises their summed distance.

    References
    ----------
    Kuhn, H. W. (1955). The Hungarian method for the assignment problem. *Naval
    Research Logistics Quarterly*, 2, 83-97.
    Crouse, D. F. (2016). On implementing 2D rectangular assignment algorithms.
    *IEEE Transactions on Aerospace and Electronic Systems*, 52(4), 1679-1696.
    """
    if cand.empty:
        return cand[["ia", "ib"]].copy()
    ia = cand["ia"].to_numpy()
    ib = cand["ib"].to_numpy()
    # imported here so that validating a configuration (which reads this module's
    # registry) does not pay for scipy's start-up
    from scipy.optimize import linear_sum_assignment
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    graph = coo_matrix((np.ones(len(cand)), (ia, n_a + ib)), shape=(n_a + n_b, n_a + n_b))
    _, label = connected_components(graph, directed=False)
    comp = label[ia]
    per_comp = np.bincount(comp)
    # a group with one candidate pair is its own answer; only the rest need the solver
    lone = per_comp[comp] == 1
    chosen_a: list[np.ndarray] = [ia[lone]]
    chosen_b: list[np.ndarray] = [ib[lone]]
    distance = cand["distance_s"].to_numpy()
    # candidate rows of the other groups, group by group (numpy, not a pandas groupby:
    # a session has hundreds of small groups)
    rest = np.flatnonzero(~lone)
    rest = rest[np.argsort(comp[rest], kind="stable")]
    groups = np.split(rest, np.flatnonzero(np.diff(comp[rest])) + 1) if len(rest) else []
    for grp in groups:
        ua, ra = np.unique(ia[grp], return_inverse=True)
        ub, rb = np.unique(ib[grp], return_inverse=True)
        dist = distance[grp]
        forbidden = float(dist.max()) * min(len(ua), len(ub)) + 1.0
        cost = np.full((len(ua), len(ub)), forbidden)
        cost[ra, rb] = dist
        allowed = np.zeros_like(cost, dtype=bool)
        allowed[ra, rb] = True
        rows, cols = linear_sum_assignment(cost)
        ok = allowed[rows, cols]
        chosen_a.append(ua[rows[ok]])
        chosen_b.append(ub[cols[ok]])
    return pd.DataFrame({"ia": np.concatenate(chosen_a), "ib": np.concatenate(chosen_b)})


def match_greedy(cand: pd.DataFrame, n_a: int, n_b: int) -> pd.DataFrame:
    """One-to-one matching taking the closest remaining candidate pair first.

    Ties in distance go to the earlier switch of A, then the earlier switch of B.
    The result is a maximal (not always maximum) matching.

    References
    ----------
    No single published source: nearest-first one-to-one assignment is common
    practice in scoring detected events against reference events.
    """
    if cand.empty:
        return cand[["ia", "ib"]].copy()
    ordered = cand.sort_values(["distance_s", "ia", "ib"], kind="stable")
    used_a = np.zeros(n_a, dtype=bool)
    used_b = np.zeros(n_b, dtype=bool)
    keep_a: list[int] = []
    keep_b: list[int] = []
    # sequential by nature: each choice removes later candidates (one pass over pairs)
    for i, j in zip(ordered["ia"].to_numpy(), ordered["ib"].to_numpy()):
        if not used_a[i] and not used_b[j]:
            used_a[i] = used_b[j] = True
            keep_a.append(int(i))
            keep_b.append(int(j))
    return pd.DataFrame({"ia": np.array(keep_a, dtype=np.int64),
                         "ib": np.array(keep_b, dtype=np.int64)})


#: Matching rules, by the name `[agreement] switch_matching` takes.
MATCHING_METHODS: dict[str, Callable[[pd.DataFrame, int, int], pd.DataFrame]] = {
    "optimal": match_optimal,  # maximum matching, least total distance (Kuhn 1955)
    "greedy": match_greedy,    # closest pair first
}


def _check_events(events: pd.DataFrame, who: str) -> pd.DataFrame:
    missing = [c for c in EVENT_COLUMNS if c not in events.columns]
    if missing:
        raise ValueError(f"switch table of {who} lacks column(s) {', '.join(missing)}")
    return events.reset_index(drop=True)


def _ratio(num: int, den: int) -> float:
    return float(num / den) if den > 0 else float("nan")


def compare_switches(a: pd.DataFrame, b: pd.DataFrame, tolerance_s: float,
                     method: str = "optimal") -> SwitchAgreement:
    """Match coder B's switches to coder A's (the reference) and score the match.

    Parameters
    ----------
    a, b
        One row per switch with ``time_s``, ``from_platform``, ``to_platform``.
    tolerance_s
        Largest time difference (inclusive, seconds) of a matching pair.
    method
        Matching rule, a key of :data:`MATCHING_METHODS`.

    Returns
    -------
    SwitchAgreement
        Precision, recall and F1 are NaN where their denominator is zero (no switches
        of B, of A, or of either).
    """
    fn = choose(MATCHING_METHODS, method, "switch matching method")
    if tolerance_s < 0:
        raise ConfigError(f"switch tolerance {tolerance_s!r} s is negative",
                          hint="[agreement] switch_tolerance_s must be 0 or more")
    a = _check_events(a, "coder A")
    b = _check_events(b, "coder B")
    cand = candidate_pairs(a, b, tolerance_s)
    chosen = fn(cand, len(a), len(b))
    ia = chosen["ia"].to_numpy(dtype=np.int64)
    ib = chosen["ib"].to_numpy(dtype=np.int64)
    order = np.lexsort((ib, ia))  # pairs in order of A's switch, then B's
    ia, ib = ia[order], ib[order]
    ta = a["time_s"].to_numpy(dtype=float)[ia]
    tb = b["time_s"].to_numpy(dtype=float)[ib]
    pairs = pd.DataFrame({
        "index_a": ia, "index_b": ib, "time_a_s": ta, "time_b_s": tb, "offset_s": tb - ta,
        "from_platform": a["from_platform"].to_numpy(dtype=object)[ia],
        "to_platform": a["to_platform"].to_numpy(dtype=object)[ia],
    }, columns=list(MATCH_COLUMNS))
    n_a, n_b, m = len(a), len(b), len(pairs)
    return SwitchAgreement(
        switches_a=n_a, switches_b=n_b, matched=m,
        precision=_ratio(m, n_b), recall=_ratio(m, n_a), f1=_ratio(2 * m, n_a + n_b),
        pairs=pairs,
    )
