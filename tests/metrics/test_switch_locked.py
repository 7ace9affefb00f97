"""Switch-locked arousal trajectories and the pre-switch test."""

import numpy as np
import pandas as pd
import pytest
from scipy.signal import lfilter

from pipeline.metrics.switch_locked import (SESSION_COLUMNS, TEST_COLUMNS, TRAJECTORY_COLUMNS,
                                            session_seed, switch_locked_session,
                                            switch_locked_summary)


def timeline(n=1000, arousal=None, state="multi", coded=True):
    return pd.DataFrame({
        "participant_id": "p1", "session_id": "s1", "second": np.arange(n),
        "state": pd.array([state] * n if isinstance(state, str) else state, dtype="string"),
        "arousal": np.arange(n) / 100.0 if arousal is None else arousal,
        "coded": coded if not isinstance(coded, bool) else np.full(n, coded)})


def test_trajectory_is_the_event_locked_mean_with_edges_left_empty():
    # event-related averaging (Luck 2014): arousal = second / 100, switches at 100 and 500
    # -> mean at lag L is (100 + 500) / 2 / 100 + L / 100
    out = switch_locked_session(timeline(), pd.DataFrame({"second": [100, 500]}), 1,
                                window_s=60, n_pseudo=10)
    assert list(out.columns) == ["participant_id", "session_id", *SESSION_COLUMNS]
    sw = out[out.kind == "switch"].set_index("lag_s")
    assert len(sw) == 121
    np.testing.assert_allclose(sw.arousal_mean_z, 3 + sw.index / 100)
    assert (sw.n_valid == 2).all() and (sw.n_events == 2).all()
    near_edge = switch_locked_session(timeline(), pd.DataFrame({"second": [20]}), 1,
                                      window_s=60, n_pseudo=10)
    e = near_edge[near_edge.kind == "switch"].set_index("lag_s")
    assert e.loc[-21, "n_valid"] == 0 and np.isnan(e.loc[-21, "arousal_mean_z"])
    assert e.loc[-20, "n_valid"] == 1 and e.loc[-20, "arousal_mean_z"] == pytest.approx(0.0)


def test_pseudo_switches_fall_in_coded_multi_seconds_only():
    n = 1000
    state = np.where(np.arange(n) % 100 < 40, "multi", "single")
    coded = np.arange(n) < 900
    # arousal marks coded multi seconds with 1, everything else 0 (uncoded multi: 5)
    arousal = np.where(state == "multi", np.where(coded, 1.0, 5.0), 0.0)
    out = switch_locked_session(timeline(n, arousal, state, coded), pd.DataFrame({"second": []}),
                                7, window_s=5, n_pseudo=300)
    lag0 = out[(out.kind == "pseudo") & (out.lag_s == 0)].iloc[0]
    assert lag0.n_events == 300 and lag0.arousal_mean_z == 1.0
    assert (out[out.kind == "switch"].n_events == 0).all()


def test_pseudo_placement_is_reproducible_from_the_seed():
    tl = timeline(arousal=np.random.default_rng(0).normal(size=1000))
    a = switch_locked_session(tl, pd.DataFrame({"second": [300]}), 42, n_pseudo=50)
    b = switch_locked_session(tl, pd.DataFrame({"second": [300]}), 42, n_pseudo=50)
    c = switch_locked_session(tl, pd.DataFrame({"second": [300]}), 43, n_pseudo=50)
    pd.testing.assert_frame_equal(a, b)
    assert not np.allclose(a.arousal_mean_z, c.arousal_mean_z)
    assert session_seed("p1", "s1") == session_seed("p1", "s1") != session_seed("p1", "s2")


def simulate(pid, sid, seed, rise_z=0.0, n=3600, every_s=40):
    """One session: multi-platform all through, AR(1) arousal; optionally a linear rise of
    ``rise_z`` over the 12 s before each switch (the pattern Yeykelis, Cummings & Reeves
    2014 report), back to baseline after it."""
    rng = np.random.default_rng(seed)
    a = lfilter([1.0], [1.0, -0.9], rng.normal(0, 0.3, n))  # AR(1), phi = 0.9
    switches = np.sort(rng.choice(np.arange(100, n - 100), n // every_s, replace=False))
    if rise_z:
        ramp = np.zeros(n)
        for s in switches:
            ramp[s - 12:s + 1] += rise_z * np.arange(13) / 12
        a = a + ramp
    tl = pd.DataFrame({"participant_id": pid, "session_id": sid, "second": np.arange(n),
                       "state": pd.array(["multi"] * n, dtype="string"), "arousal": a,
                       "coded": True})
    return switch_locked_session(tl, pd.DataFrame({"second": switches}),
                                 session_seed(pid, sid), window_s=60, n_pseudo=200)


def study(rise_a, rise_b, n=6, seed=0):
    per, roster = [], []
    for ci, (cohort, rise) in enumerate((("a", rise_a), ("b", rise_b))):
        for i in range(n):
            pid = f"{cohort}{i}"
            roster.append({"participant_id": pid, "cohort": cohort})
            for s in range(2):
                per.append(simulate(pid, f"s{s}", seed + 1000 * ci + 10 * i + s, rise))
    return pd.concat(per, ignore_index=True), pd.DataFrame(roster)


def test_summary_detects_a_pre_switch_rise_with_participants_as_the_unit():
    per, roster = study(0.5, 0.5)
    traj, test, lines = switch_locked_summary(per, roster, pre_s=12)
    assert list(traj.columns) == TRAJECTORY_COLUMNS and list(test.columns) == TEST_COLUMNS
    assert set(traj.level) == {"participant", "cohort"}
    assert len(traj[traj.level == "participant"]) == 12 * 121
    allrow = test[test.scope == "all"].iloc[0]
    assert allrow.n_participants == 12 and allrow.df == 11  # participants, not switches
    # simulated rise: 0.5 z over 12 s = 0.0417 z/s (the AR(1) noise leaves it unbiased)
    assert allrow.ci_low < 0.5 / 12 < allrow.ci_high
    assert allrow.direction == "rises" and allrow.p_value < 0.001
    cohort_a = traj[(traj.level == "cohort") & (traj.cohort == "a")].set_index("lag_s")
    assert cohort_a.loc[0, "arousal_difference_z"] > 0.3
    assert cohort_a.loc[0, "n_participants"] == 6
    assert any("all participants" in x and "rises" in x for x in lines)


def test_no_rise_gives_no_clear_change_and_a_cohort_difference_is_found():
    per, roster = study(0.0, 0.0, seed=5)
    _, test, _ = switch_locked_summary(per, roster, pre_s=12)
    allrow = test[test.scope == "all"].iloc[0]
    assert allrow.ci_low < 0 < allrow.ci_high and allrow.direction == "no clear change"
    per, roster = study(0.0, 0.8, seed=9)
    _, test, _ = switch_locked_summary(per, roster, pre_s=12)
    diff = test[test.scope == "cohort_difference"].iloc[0]
    assert diff.cohort == "b" and diff.reference == "a"
    assert diff.slope_z_per_s > 0 and diff.p_value < 0.01


def test_participants_with_too_few_switches_are_left_out_and_counted():
    per, roster = study(0.3, 0.3, n=3)
    per = per[~((per.participant_id == "a0") & (per.kind == "switch"))]
    few = simulate("a0", "s0", 99, 0.3, n=400, every_s=200)  # 2 switches
    per = pd.concat([per, few], ignore_index=True)
    _, test, lines = switch_locked_summary(per, roster, min_events=5)
    assert test[test.scope == "all"].iloc[0].n_left_out == 1
    assert any("1 participant(s) with fewer than 5 switches" in x for x in lines)


def test_empty_input_gives_a_line_not_a_crash():
    traj, test, lines = switch_locked_summary(pd.DataFrame(), pd.DataFrame(
        {"participant_id": [], "cohort": []}))
    assert traj.empty and test.empty and "no sessions" in lines[0]


def test_cohort_intervals_are_student_t_across_participants():
    # Student (1908): mean +/- t_{n-1} s / sqrt(n) of the participant values at one lag
    from scipy import stats

    per, roster = study(0.5, 0.5, n=4)
    traj, _, _ = switch_locked_summary(per, roster)
    parts = traj[(traj.level == "participant") & (traj.cohort == "b") & (traj.lag_s == -3)]
    row = traj[(traj.level == "cohort") & (traj.cohort == "b") & (traj.lag_s == -3)].iloc[0]
    for value, lo, hi in (("arousal_switch_z", "switch_ci_low", "switch_ci_high"),
                          ("arousal_pseudo_z", "baseline_ci_low", "baseline_ci_high"),
                          ("arousal_difference_z", "difference_ci_low", "difference_ci_high")):
        v = parts[value].to_numpy()
        half = stats.t.ppf(0.975, len(v) - 1) * v.std(ddof=1) / np.sqrt(len(v))
        assert row[value] == pytest.approx(v.mean())
        assert (row[lo], row[hi]) == pytest.approx((v.mean() - half, v.mean() + half))
    assert row.n_participants == 4
