"""Kaplan-Meier dwell curves against a published example and against lifelines."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from pipeline.report.survival import kaplan_meier, km_median

# Freireich et al. (1963), 6-MP arm (weeks of remission, False = censored), as tabulated
# in Kleinbaum & Klein, "Survival Analysis: A Self-Learning Text".
SIX_MP = [(6, True), (6, True), (6, True), (6, False), (7, True), (9, False), (10, True),
          (10, False), (11, False), (13, True), (16, True), (17, False), (19, False),
          (20, False), (22, True), (23, True), (25, False), (32, False), (32, False),
          (34, False), (35, False)]


def test_six_mp_arm_matches_the_published_table():
    t, e = zip(*SIX_MP)
    km = kaplan_meier(t, e).set_index("time_s")
    # Kleinbaum & Klein's table of S(t) for the 6-MP group (from memory)
    expected = {6: 0.857, 7: 0.807, 10: 0.753, 13: 0.690, 16: 0.627, 22: 0.538, 23: 0.448}
    for time, s in expected.items():
        assert km.loc[time, "survival"] == pytest.approx(s, abs=5e-4)
    # median remission 23 weeks (Kleinbaum & Klein; also in STYLE's example)
    assert km_median(kaplan_meier(t, e)) == 23
    assert km.loc[6, "at_risk"] == 21 and km.loc[6, "events"] == 3 and km.loc[6, "censored"] == 1


def test_matches_lifelines_on_censored_dwell_times():
    rng = np.random.default_rng(3)
    t = np.ceil(rng.exponential(6, 400))
    e = rng.random(400) > 0.2
    ours = kaplan_meier(t, e)
    ref = KaplanMeierFitter().fit(t, e)
    sf = ref.survival_function_.iloc[:, 0]
    assert np.allclose(ours["survival"].to_numpy(), sf.loc[ours["time_s"]].to_numpy())
    assert km_median(ours) == ref.median_survival_time_


def test_never_halved_gives_no_median_and_bad_lengths_are_ignored():
    km = kaplan_meier([1, 2, 3, np.nan, -1], [False, False, True, True, True])
    assert list(km["time_s"]) == [1, 2, 3]
    assert np.isnan(km_median(kaplan_meier([5, 6], [False, False])))
    with pytest.raises(ValueError):
        kaplan_meier([1, 2], [True])
