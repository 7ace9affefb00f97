"""One-to-one matching of two coders' switch events within a tolerance."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from pipeline.agreement.events import MATCHING_METHODS, candidate_pairs, compare_switches
from pipeline.errors import ConfigError

METHODS = sorted(MATCHING_METHODS)


def switches(*rows: tuple[float, str, str]) -> pd.DataFrame:
    return pd.DataFrame(list(rows), columns=["time_s", "from_platform", "to_platform"])


@pytest.mark.parametrize("method", METHODS)
def test_exactly_at_tolerance_matches_and_one_more_does_not(method):
    a = switches((100, "tv", "phone"))
    at = compare_switches(a, switches((102, "tv", "phone")), tolerance_s=2, method=method)
    assert at.matched == 1 and at.precision == 1.0 and at.recall == 1.0 and at.f1 == 1.0
    assert at.pairs["offset_s"].tolist() == [2.0]
    early = compare_switches(a, switches((98, "tv", "phone")), tolerance_s=2, method=method)
    assert early.matched == 1
    beyond = compare_switches(a, switches((103, "tv", "phone")), tolerance_s=2, method=method)
    assert beyond.matched == 0
    assert beyond.precision == 0.0 and beyond.recall == 0.0 and beyond.f1 == 0.0


@pytest.mark.parametrize("method", METHODS)
def test_zero_tolerance_needs_the_same_second(method):
    a = switches((10, "tv", "phone"), (20, "phone", "tv"))
    b = switches((10, "tv", "phone"), (21, "phone", "tv"))
    assert compare_switches(a, b, tolerance_s=0, method=method).matched == 1


@pytest.mark.parametrize("method", METHODS)
def test_different_platforms_never_match(method):
    a = switches((50, "tv", "phone"))
    # same moment, different to-platform; different from-platform; reversed direction
    b = switches((50, "tv", "laptop"), (50, "laptop", "phone"), (50, "phone", "tv"))
    r = compare_switches(a, b, tolerance_s=5, method=method)
    assert r.matched == 0
    assert r.switches_a == 1 and r.switches_b == 3
    assert r.precision == 0.0 and r.recall == 0.0


@pytest.mark.parametrize("method", METHODS)
def test_one_to_one_two_b_switches_near_one_a_switch_count_once(method):
    a = switches((30, "tv", "phone"))
    b = switches((29, "tv", "phone"), (31, "tv", "phone"))
    r = compare_switches(a, b, tolerance_s=2, method=method)
    assert r.matched == 1
    assert r.precision == pytest.approx(0.5)  # 1 of B's 2 switches matched
    assert r.recall == pytest.approx(1.0)     # A's one switch found
    assert r.f1 == pytest.approx(2 * 1 / (1 + 2))
    assert len(set(r.pairs["index_a"])) == len(r.pairs) == len(set(r.pairs["index_b"]))


def test_optimal_finds_more_pairs_than_greedy_where_a_close_pair_blocks_two():
    # A at 10 and 13, B at 12 and 15, tolerance 2: greedy takes the closest (13, 12)
    # first, after which 10 and 15 are 5 s apart; the optimal matching pairs
    # (10, 12) and (13, 15).
    a = switches((10, "tv", "phone"), (13, "tv", "phone"))
    b = switches((12, "tv", "phone"), (15, "tv", "phone"))
    assert compare_switches(a, b, 2, "greedy").matched == 1
    opt = compare_switches(a, b, 2, "optimal")
    assert opt.matched == 2
    assert opt.pairs[["time_a_s", "time_b_s"]].values.tolist() == [[10, 12], [13, 15]]


def test_optimal_prefers_the_closer_pair_among_equally_many():
    a = switches((10, "tv", "phone"))
    b = switches((8, "tv", "phone"), (11, "tv", "phone"))
    r = compare_switches(a, b, 2, "optimal")
    assert r.pairs["time_b_s"].tolist() == [11.0]


def _brute_force_max_matching(a: pd.DataFrame, b: pd.DataFrame, tol: float) -> int:
    """Largest one-to-one matching by trying every assignment (tiny inputs only)."""
    ok = np.array([[abs(ta - tb) <= tol and fa == fb and xa == xb
                    for tb, fb, xb in b.itertuples(index=False)]
                   for ta, fa, xa in a.itertuples(index=False)], dtype=bool).reshape(len(a), len(b))
    best = 0
    for perm in itertools.permutations(range(len(b)), min(len(a), len(b))):
        best = max(best, int(sum(ok[i, j] for i, j in enumerate(perm))))
    return best


@pytest.mark.parametrize("seed", range(20))
def test_optimal_matching_is_maximum_against_brute_force(seed):
    rng = np.random.default_rng(seed)
    plats = ["tv", "phone", "laptop"]

    def draw(n):
        frm = rng.choice(plats, n)
        to = np.array([rng.choice([p for p in plats if p != f]) for f in frm])
        return switches(*zip(np.sort(rng.integers(0, 25, n)).astype(float), frm, to))

    a, b = draw(int(rng.integers(0, 7))), draw(int(rng.integers(0, 7)))
    tol = int(rng.integers(0, 4))
    r = compare_switches(a, b, tol, "optimal")
    assert r.matched == _brute_force_max_matching(a, b, tol)
    g = compare_switches(a, b, tol, "greedy")
    assert g.matched <= r.matched
    for res in (r, g):
        assert (res.pairs["offset_s"].abs() <= tol).all()
        assert res.pairs["index_a"].is_unique and res.pairs["index_b"].is_unique


def test_no_switches_gives_undefined_rates_not_zero():
    none = switches()
    both_empty = compare_switches(none, none, 2)
    assert both_empty.matched == 0
    assert np.isnan(both_empty.precision) and np.isnan(both_empty.recall)
    assert np.isnan(both_empty.f1)
    only_a = compare_switches(switches((5, "tv", "phone")), none, 2)
    assert np.isnan(only_a.precision) and only_a.recall == 0.0 and only_a.f1 == 0.0


def test_candidate_pairs_keep_kinds_apart_even_far_in_time():
    # kinds are laid out on one axis; a pair of different kinds must never appear,
    # whatever the times
    a = switches((0, "tv", "phone"), (1000, "phone", "tv"))
    b = switches((1000, "tv", "phone"), (0, "phone", "tv"))
    assert candidate_pairs(a, b, 5).empty


def test_unknown_matching_method_and_negative_tolerance_are_config_errors():
    a = switches((1, "tv", "phone"))
    with pytest.raises(ConfigError) as err:
        compare_switches(a, a, 2, method="hungarian")
    assert "greedy" in err.value.hint and "optimal" in err.value.hint
    with pytest.raises(ConfigError):
        compare_switches(a, a, -1)


def test_many_switches_match_quickly():
    # a long evening: about 2000 switches per coder
    rng = np.random.default_rng(3)
    t = np.sort(rng.choice(np.arange(4 * 3600), 2000, replace=False)).astype(float)
    frm = np.where(np.arange(2000) % 2 == 0, "tv", "phone")
    to = np.where(frm == "tv", "phone", "tv")
    a = switches(*zip(t, frm, to))
    b = switches(*zip(t + rng.integers(-1, 2, 2000), frm, to))
    r = compare_switches(a, b, 2)
    # each B switch is within 1 s of its own A switch, so a full matching exists
    assert r.matched == 2000
