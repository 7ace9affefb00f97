"""Kaplan–Meier dwell times against a published example and against lifelines."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from lifelines.datasets import load_leukemia

from pipeline.errors import ConfigError
from pipeline.metrics.dwell import dwell_median, km_curve, km_median


def _arm(rx):
    d = load_leukemia()
    arm = d[d["Rx"] == rx]
    return arm["t"].to_numpy(), arm["status"].to_numpy().astype(bool)


def test_leukemia_codes_six_mp_as_rx_0():
    # Freireich et al. (1963), Blood 21:699: 21 patients per arm; the 6-MP arm has 12
    # censored remissions (9 relapses), the placebo arm none censored (21 relapses).
    t0, e0 = _arm(0)
    t1, e1 = _arm(1)
    assert len(t0) == len(t1) == 21
    assert (~e0).sum() == 12 and e0.sum() == 9
    assert e1.all()


def test_km_curve_matches_published_six_mp_survival():
    # Freireich et al. (1963), Blood 21:699; 6-MP arm as tabulated in Kleinbaum & Klein,
    # "Survival Analysis" (Kaplan–Meier table; textbook match from memory).
    t, e = _arm(0)
    curve = km_curve(t, e)
    assert curve["time_s"].tolist() == [6, 7, 10, 13, 16, 22, 23]
    np.testing.assert_allclose(curve["survival"],
                               [.8571, .8067, .7529, .6902, .6275, .5378, .4482], atol=5e-5)
    assert curve["at_risk"].tolist() == [21, 17, 15, 12, 11, 7, 6]
    # Greenwood (1926) standard error at 23 weeks, same table (from memory).
    assert curve["std_error"].iloc[-1] == pytest.approx(.1346, abs=5e-5)


def test_km_median_matches_published_leukemia_medians():
    # Freireich et al. (1963); Kleinbaum & Klein, "Survival Analysis": median remission
    # 23 weeks on 6-MP, 8 weeks on placebo (from memory).
    assert km_median(*_arm(0)) == 23
    assert km_median(*_arm(1)) == 8


def test_km_median_is_the_first_time_survival_reaches_one_half():
    # Hand-worked: times 1,2,3+,4. S(1) = 3/4, S(2) = 3/4 * 2/3 = 1/2, S(4) = 0.
    # S(2) = 0.5 exactly, so the median is 2 (lifelines' convention; statsmodels'
    # strict S < 0.5 would give 4, R's survfit the midpoint 3).
    t, e = [1, 2, 3, 4], [True, True, False, True]
    assert km_median(t, e) == 2
    assert KaplanMeierFitter().fit(t, e).median_survival_time_ == 2  # lifelines reference


def test_km_median_nan_when_survival_never_reaches_one_half():
    # 4 bouts, one observed end at 2 (S = 3/4), the rest censored: no median.
    assert np.isnan(km_median([2, 5, 6, 7], [True, False, False, False]))
    assert np.isinf(KaplanMeierFitter().fit([2, 5, 6, 7], [1, 0, 0, 0]).median_survival_time_)
    assert np.isnan(km_median([3, 4], [False, False]))
    assert np.isnan(km_median([], []))
    assert len(km_curve([3, 4], [False, False])) == 0


def test_km_without_censoring_is_the_empirical_median():
    # No censoring: S(t) is the empirical survival; 1,2,3,4,5 -> S(3) = 2/5 <= .5, S(2) = .6.
    assert km_median([5, 1, 4, 2, 3], [True] * 5) == 3


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_km_curve_matches_lifelines_on_random_censored_data(seed):
    rng = np.random.default_rng(seed)
    n = 200
    t = rng.integers(1, 40, n).astype(float)   # whole seconds: many ties, like bouts
    e = rng.random(n) < 0.7
    curve = km_curve(t, e)
    kmf = KaplanMeierFitter().fit(t, e)
    table = kmf.event_table
    events = table[table["observed"] > 0]
    np.testing.assert_array_equal(curve["time_s"], events.index.to_numpy())
    np.testing.assert_allclose(
        curve["survival"], kmf.survival_function_.loc[events.index, "KM_estimate"], rtol=1e-10)
    np.testing.assert_array_equal(curve["at_risk"], events["at_risk"].to_numpy())
    # Greenwood (1926): Var S(t) = S(t)^2 * sum_{t_i <= t} d_i / (n_i (n_i - d_i)),
    # from lifelines' event table.
    d, r = events["observed"].to_numpy(), events["at_risk"].to_numpy()
    s = curve["survival"].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        greenwood = s * np.sqrt(np.cumsum(d / (r * (r - d))))
    finite = s > 0
    np.testing.assert_allclose(curve["std_error"][finite], greenwood[finite], rtol=1e-10)
    median = kmf.median_survival_time_
    assert km_median(t, e) == (median if np.isfinite(median) else pytest.approx(np.nan,
                                                                                nan_ok=True))


def test_unknown_dwell_method_lists_choices():
    with pytest.raises(ConfigError) as err:
        dwell_median([1, 2], [True, True], method="median_of_observed")
    assert "kaplan_meier" in err.value.hint
    assert dwell_median([1, 2, 3], [True] * 3) == 2


@pytest.mark.parametrize("seed", range(4))
def test_km_median_is_read_off_the_statsmodels_curve(seed):
    # km_median computes the product limit itself (without the standard errors); it
    # must give exactly the median of km_curve's survival column.
    rng = np.random.default_rng(seed)
    for _ in range(200):
        n = int(rng.integers(0, 40))
        t = rng.integers(1, 10, n).astype(float)  # few distinct lengths: ties, like bouts
        if n and rng.random() < 0.2:
            t[rng.integers(0, n)] = np.nan
        e = rng.random(n) < rng.random()
        curve = km_curve(t, e)
        below = np.flatnonzero(curve["survival"].to_numpy() <= 0.5 + 1e-9)
        expected = float(curve["time_s"].iloc[below[0]]) if len(below) else np.nan
        got = km_median(t, e)
        assert got == expected or (np.isnan(got) and np.isnan(expected))
