"""Media codes: the behaviour object, the switch count of the truth, coders, uncoded stretches."""

from __future__ import annotations

import numpy as np
import pytest

from synthetic_diaries.codes import (
    _simulate,
    count_switches,
    design_switch_rate_per_multi_hour,
    draw_uncoded,
    expected_bout_s,
    second_coder,
    simulate_session_codes,
)
from synthetic_diaries.options import CodingOptions, CohortBehaviour, SynthOptions, UncodedOptions

E = np.array([], dtype=np.int64)


def _count(bouts, uncoded=(), **kw):
    s = np.array([b[1] for b in bouts])
    e = np.array([b[2] for b in bouts])
    p = np.array([b[0] for b in bouts])
    u0 = np.array([u[0] for u in uncoded], dtype=np.int64)
    u1 = np.array([u[1] for u in uncoded], dtype=np.int64)
    return count_switches(s, e, p, u0, u1, **kw)


# Worked by hand from the definitions of CONTRACT §2 (attention bout, switch).
def test_switch_needs_another_platform_within_max_gap():
    bouts = [(0, 0, 10), (1, 10, 20), (0, 23, 30), (1, 34, 40)]  # gaps 0, 3, 4
    n, at = _count(bouts)
    assert n == 2 and at.tolist() == [10, 23]
    n, _ = _count(bouts, max_gap_s=4)
    assert n == 3


def test_uncoded_seconds_between_bouts_break_the_switch():
    bouts = [(0, 0, 10), (1, 10, 20), (0, 20, 30)]
    n, at = _count(bouts, uncoded=[(18, 22)])  # phone [10,18) | uncoded | tv [22,30)
    assert n == 1 and at.tolist() == [10]
    n, _ = _count(bouts, uncoded=[(5, 25)])  # only tv [0,5) and tv [25,30) are left
    assert n == 0


def test_short_bouts_are_dropped_and_count_as_gap():
    bouts = [(0, 0, 10), (1, 10, 11), (0, 11, 20), (2, 21, 30)]
    assert _count(bouts)[0] == 3
    assert _count(bouts, min_bout_s=2)[0] == 1  # tv ... tv -> laptop
    bouts = [(0, 0, 10), (1, 10, 12), (2, 12, 20)]
    assert _count(bouts, min_bout_s=3)[0] == 1  # the dropped 2 s are a gap of 2 <= 3
    assert _count(bouts, min_bout_s=3, max_gap_s=1)[0] == 0


def test_simulated_codes_follow_the_media_log_rules():
    behaviour = SynthOptions().cohorts[0]
    codes = simulate_session_codes(np.random.default_rng(3), behaviour, 8 * 3600)
    assert list(codes.columns) == ["second", "in_view", "attended"]
    assert codes["second"].tolist() == list(range(8 * 3600))
    in_view = codes["in_view"].str.split(";")
    assert all(v == sorted(v) for v in in_view if v != [""])
    assert all(a == "" or a in v for a, v in zip(codes["attended"], in_view))
    seen = {c for v in in_view for c in v if c}
    assert seen <= behaviour.platforms()
    n = in_view.map(lambda v: len([c for c in v if c]))
    assert {0, 1, 2} <= set(n)  # none, single and multi stretches all occur
    again = simulate_session_codes(np.random.default_rng(3), behaviour, 8 * 3600)
    assert codes.equals(again)


@pytest.mark.parametrize("distribution,shape", [("lognormal", 0.8), ("gamma", 1.5)])
def test_switch_rate_inside_multi_time_matches_the_design_rate(distribution, shape):
    # One multi-platform stretch per session, two platforms: the only switches are
    # the alternations the bout distribution and gaps imply.
    b = CohortBehaviour(name="x", multi_probability=1.0, none_probability=0.0,
                        multi_stretch_mean_min=1e5, third_platform_probability=0.0,
                        bout_distribution=distribution, bout_shape=shape, bout_mean_s=20.0)
    rng = np.random.default_rng(11)
    switches = multi = 0
    for _ in range(12):
        c = _simulate(rng, b, 4 * 3600, 1.0, sorted(b.platforms()))
        switches += count_switches(c.bout_start, c.bout_end, c.bout_platform, E, E)[0]
        multi += int((c.state == 2).sum())
    rate = switches / (multi / 3600)
    assert rate == pytest.approx(design_switch_rate_per_multi_hour(b), rel=0.04)
    assert expected_bout_s(b) == pytest.approx(20.0, abs=0.3)


def test_rate_multiplier_speeds_up_switching():
    b = CohortBehaviour(name="x", multi_probability=1.0, none_probability=0.0,
                        multi_stretch_mean_min=1e5, third_platform_probability=0.0)
    rng = np.random.default_rng(5)

    def rate(m):
        c = _simulate(rng, b, 8 * 3600, m, sorted(b.platforms()))
        return count_switches(c.bout_start, c.bout_end, c.bout_platform, E, E)[0] / 8

    ratio = rate(2.0) / rate(1.0)
    design = (design_switch_rate_per_multi_hour(b, rate_multiplier=2.0)
              / design_switch_rate_per_multi_hour(b))
    assert ratio == pytest.approx(design, rel=0.06)
    assert 1.6 < design < 2.0  # bouts halve, gaps do not


def test_second_coder_stays_in_view_and_disagrees_a_little():
    b = SynthOptions().cohorts[0]
    platforms = sorted(SynthOptions().platform_groups)
    codes = _simulate(np.random.default_rng(2), b, 2 * 3600, 1.0, platforms)
    same = second_coder(np.random.default_rng(1), codes,
                        CodingOptions(boundary_jitter_s=0, disagreement_share=0.0))
    assert np.array_equal(same, codes.attended)
    other = second_coder(np.random.default_rng(1), codes,
                         CodingOptions(boundary_jitter_s=2, disagreement_share=0.05))
    members = codes.combo_members[codes.in_view]
    assert ((other == -1) | (members == other[:, None]).any(axis=1)).all()
    differ = float(np.mean(other != codes.attended))
    assert 0.02 < differ < 0.2


def test_uncoded_stretches_are_disjoint_and_long_enough():
    opts = UncodedOptions(rate_per_hour=30.0, min_s=10, mean_s=40.0)
    s, e = draw_uncoded(np.random.default_rng(4), 3600, opts)
    assert len(s) > 5
    assert (e - s >= 10).all() and (s[1:] > e[:-1]).all()
    assert s[0] >= 0 and e[-1] <= 3600
