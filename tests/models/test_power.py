"""Simulation-based power: binomial intervals, calibration, coverage, the CLI."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_confint
from typer.testing import CliRunner

from pipeline.cli import app
from pipeline.config import SwitchSettings
from pipeline.errors import ConfigError
from pipeline.models.power import (POWER_COLUMNS, PowerScenario, bout_rate_multiplier,
                                   clopper_pearson_interval, default_behaviour, power_table,
                                   simulate_study, true_log_rate_ratio, wilson_interval)


@pytest.mark.parametrize("k,n,lo,hi", [
    # Newcombe (1998), "Two-sided confidence intervals for the single proportion",
    # Stat Med 17:857-872, Table II, Wilson score method. # from memory; the same values
    # come from statsmodels' proportion_confint(method="wilson"), checked below.
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0, 0.1611),
    (1, 29, 0.0061, 0.1718),
])
def test_wilson_interval_matches_newcombe_1998(k, n, lo, hi):
    got = wilson_interval(k, n, 0.95)
    assert got == pytest.approx((lo, hi), abs=5e-5)
    # reference library: statsmodels
    assert got == pytest.approx(proportion_confint(k, n, method="wilson"), abs=1e-12)


def test_clopper_pearson_matches_statsmodels_beta_method():
    # Clopper & Pearson (1934); reference library statsmodels proportion_confint("beta")
    for k, n in ((0, 10), (3, 10), (10, 10), (57, 200)):
        assert clopper_pearson_interval(k, n, 0.95) == pytest.approx(
            proportion_confint(k, n, method="beta"), abs=1e-10)


def test_bout_multiplier_reaches_the_design_rate_ratio():
    from synthetic_diaries.codes import design_switch_rate_per_multi_hour as design

    b = default_behaviour()
    for ratio in (0.7, 1.5, 2.0):
        m = bout_rate_multiplier(b, ratio, 3)
        assert design(b, 3, m) / design(b, 3, 1.0) == pytest.approx(ratio, rel=1e-8)
    assert bout_rate_multiplier(b, 1.0) == 1.0


def test_simulated_study_has_the_session_table_the_model_needs():
    sc = PowerScenario(default_behaviour(), sessions=2, hours=0.5, rate_ratio=1.5)
    d = simulate_study(np.random.default_rng(0), sc, 3, 1.5, SwitchSettings())
    assert len(d) == 2 * 3 * 2
    assert set(d.cohort) == {"reference", "comparison"}
    assert d.groupby("participant_id").size().eq(2).all()
    ok = d.multi_hours * 60 >= 5
    np.testing.assert_allclose(d.switches_per_hour[ok], d.switches[ok] / d.multi_hours[ok])
    assert d.switches_per_hour[~ok].isna().all()


def test_no_effect_gives_a_true_ratio_of_one():
    sc = PowerScenario(default_behaviour(), sessions=1, hours=0.5, rate_ratio=1.0)
    est, se = true_log_rate_ratio(sc, 1.0, SwitchSettings(), seed=3, n_sessions=60)
    assert abs(est) < 3 * se + 0.02


def test_power_table_is_reproducible_and_sizes_do_not_disturb_each_other():
    sc = PowerScenario(default_behaviour(), sessions=2, hours=0.5, rate_ratio=1.5)
    kw = dict(simulations=3, seed=5, truth_sessions=20)
    one = power_table([3], sc, **kw)
    two = power_table([3, 4], sc, **kw)
    assert list(one.columns) == POWER_COLUMNS
    pd.testing.assert_frame_equal(one, two.iloc[:1])
    r = one.iloc[0]
    assert 0 <= r.power <= 1 and r.ci_low <= r.power <= r.ci_high
    assert r.n_simulations == 3 and r.interval == "wilson"
    lo, hi = wilson_interval(int(r.n_significant), 3)
    assert (r.ci_low, r.ci_high) == pytest.approx((lo, hi))


def test_bad_inputs_are_config_errors():
    sc = PowerScenario(default_behaviour())
    with pytest.raises(ConfigError):
        power_table([1], sc, simulations=2, seed=1)
    with pytest.raises(ConfigError) as err:
        power_table([4], sc, simulations=2, seed=1, interval="exact")
    assert "clopper_pearson" in err.value.hint


@pytest.mark.slow
def test_rate_ratio_interval_covers_the_true_ratio_at_the_nominal_rate():
    # 40 synthetic studies (6 participants per cohort, 3 sessions of 45 min) simulated
    # with the generator and analysed with the study's mixed model; the true ratio comes
    # from a very large paired simulation. The count of 95 % intervals covering it must
    # be consistent with Binomial(40, 0.95): exact binomial test (Clopper & Pearson 1934
    # duality), two-sided p > 0.01, i.e. at least 34 of 40.
    sc = PowerScenario(default_behaviour(), sessions=3, hours=0.75, rate_ratio=1.5)
    table = power_table([6], sc, simulations=40, seed=2024, truth_sessions=200)
    r = table.iloc[0]
    assert r.n_fitted == 40 and r.n_not_converged == 0
    assert stats.binomtest(int(r.n_covered), 40, 0.95).pvalue > 0.01, r.to_dict()
    # the realised ratio is near the nominal one the bout lengths were calibrated to
    assert r.true_rate_ratio == pytest.approx(1.5, rel=0.05)
    assert r.median_estimated_ratio == pytest.approx(r.true_rate_ratio, rel=0.1)


runner = CliRunner()


def test_power_cli_help():
    res = runner.invoke(app, ["power", "--help"])
    assert res.exit_code == 0
    assert "--participants" in res.output and "--rate-ratio" in res.output


@pytest.mark.slow
def test_power_cli_writes_power_csv_and_the_chart(tmp_path):
    res = runner.invoke(app, ["power", "--participants", "3,4", "--sessions", "2",
                              "--hours", "0.5", "--rate-ratio", "1.5", "--simulations", "2",
                              "--seed", "1", "--truth-sessions", "10", "--out",
                              str(tmp_path)])
    assert res.exit_code == 0, res.output
    table = pd.read_csv(tmp_path / "power.csv")
    assert list(table.participants_per_cohort) == [3, 4]
    assert {"power", "ci_low", "ci_high", "n_simulations"} <= set(table.columns)
    assert "3 participants per cohort: power" in res.output
    for ext in ("png", "svg", "html"):
        assert (tmp_path / "charts" / f"power.{ext}").stat().st_size > 0


def test_power_cli_refuses_bad_participants(tmp_path):
    res = runner.invoke(app, ["power", "--participants", "8,x", "--out", str(tmp_path)])
    assert res.exit_code == 2
    assert "not a whole number" in res.output
