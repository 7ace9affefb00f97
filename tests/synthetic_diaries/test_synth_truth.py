"""truth/ agrees with the study files it describes, recounted here independently."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from synth_fixtures import recount_switches


@pytest.fixture(scope="module")
def tables(small_study):
    log = pd.read_csv(small_study / "media_log.csv", dtype={"in_view": str, "attended": str},
                      keep_default_na=False)
    truth = pd.read_csv(small_study / "truth" / "sessions.csv")
    return log[log["coder"] == "coder_a"], truth


def test_truth_switches_match_a_recount_from_the_media_log(tables):
    log, truth = tables
    assert truth["switches"].sum() > 100
    for row in truth.itertuples():
        rows = log[(log["participant_id"] == row.participant_id)
                   & (log["session_id"] == row.session_id)].sort_values("second")
        assert recount_switches(rows["second"].tolist(), rows["attended"].tolist()) \
            == row.switches, (row.participant_id, row.session_id)


def test_truth_time_budget_matches_the_media_log(tables):
    log, truth = tables
    n = log["in_view"].map(lambda v: len(v.split(";")) if v else 0)
    got = pd.DataFrame({"p": log["participant_id"], "s": log["session_id"], "n": n}) \
        .groupby(["p", "s"])["n"].agg(coded="size", media=lambda x: (x > 0).sum(),
                                        multi=lambda x: (x > 1).sum())
    t = truth.set_index(["participant_id", "session_id"])
    assert got["coded"].tolist() == t["coded_seconds"].tolist()
    assert got["media"].tolist() == t["media_seconds"].tolist()
    assert got["multi"].tolist() == t["multi_seconds"].tolist()
    rate = t["switches"] / (t["multi_seconds"] / 3600)
    defined = t["multi_seconds"] >= 5 * 60  # CONTRACT §2 min_multi_minutes
    assert np.allclose(t.loc[defined, "switches_per_hour"], rate[defined])
    assert t.loc[~defined, "switches_per_hour"].isna().all()


def test_compression_ratio_true_follows_its_definition(small_study):
    # CONTRACT §2: within-participant z over all valid seconds, p95 - p5 per state over
    # coded valid seconds with >= 10 valid minutes, ratio multi / single.
    sec = pd.read_parquet(small_study / "truth" / "seconds.parquet")
    truth = pd.read_csv(small_study / "truth" / "sessions.csv").set_index(
        ["participant_id", "session_id"])
    ok = sec["signal_valid"]
    stats = sec[ok].groupby("participant_id")["eda_clean_us"].agg(["mean", "std"])
    sec["z"] = (sec["eda_clean_us"] - sec["participant_id"].map(stats["mean"])) \
        / sec["participant_id"].map(stats["std"])
    use = sec[ok & sec["coded"]]
    defined = 0
    for (p, s), g in use.groupby(["participant_id", "session_id"]):
        ranges = {}
        for state in ("single", "multi"):
            z = g.loc[g["state"] == state, "z"]
            ranges[state] = (z.quantile(0.95) - z.quantile(0.05)) if len(z) >= 600 else np.nan
        expect = ranges["multi"] / ranges["single"]
        got = truth.loc[(p, s), "compression_ratio_true"]
        if np.isnan(expect):
            assert np.isnan(got)
        else:
            defined += 1
            assert got == pytest.approx(expect, rel=1e-9)
    assert defined >= 1


def test_truth_state_is_the_coded_state(small_study, tables):
    log, _ = tables
    sec = pd.read_parquet(small_study / "truth" / "seconds.parquet")
    merged = log.merge(sec, left_on=["participant_id", "session_id", "second"],
                       right_on=["participant_id", "session_id", "second"])
    assert len(merged) == len(log) and merged["coded"].all()
    n = merged["in_view"].map(lambda v: len(v.split(";")) if v else 0)
    assert (np.select([n == 0, n == 1], ["none", "single"], "multi") == merged["state"]).all()
    assert (~sec["coded"]).sum() == (pd.read_csv(small_study / "truth" / "sessions.csv")
                                     ["uncoded_seconds"].sum())


def test_sync_pairs_follow_the_clock_offset_and_drift(small_study, small_opts):
    sync = pd.read_csv(small_study / "sync.csv")
    truth = pd.read_csv(small_study / "truth" / "sessions.csv")
    m = sync.merge(truth, on=["participant_id", "session_id"])
    predicted = m["offset_s"] + (1 + m["drift_ppm"] * 1e-6) * m["video_s"]
    tolerance = 5 * small_opts.clock.sync_jitter_s + 1 / small_opts.sampling_rate_hz
    assert (m["sensor_s"] - predicted).abs().max() < tolerance
    assert np.allclose(m["clock_rate"], 1 + m["drift_ppm"] * 1e-6)
    c = small_opts.clock
    assert truth["offset_s"].between(c.offset_s - c.offset_spread_s,
                                     c.offset_s + c.offset_spread_s).all()
    assert truth["drift_ppm"].between(c.drift_ppm - c.drift_spread_ppm,
                                      c.drift_ppm + c.drift_spread_ppm).all()
    # the pairs fix the offset: a least-squares fit recovers it to a fraction of a second
    for (p, s), g in m.groupby(["participant_id", "session_id"]):
        rate, offset = np.polyfit(g["video_s"], g["sensor_s"], 1)
        assert offset == pytest.approx(g["offset_s"].iloc[0], abs=0.3)


def test_parameters_hold_every_option_and_the_true_cohort_rates(small_study, small_opts):
    params = json.loads((small_study / "truth" / "parameters.json").read_text())
    assert params["options"] == small_opts.model_dump(mode="json")
    ref = params["reference_cohort"]
    assert ref == sorted(c.name for c in small_opts.cohorts)[0]
    assert params["true_rate_ratio"][ref] == 1.0
    for name, c in params["cohorts"].items():
        # our scenario: about 1-3 switches per minute of multi-platform time, milder
        # than the over 4 per minute of Brasel & Gips (2011)
        assert 60 <= c["switch_rate_expected_per_multi_hour"] <= 200
        assert c["switch_rate_expected_per_multi_hour"] >= c["switch_rate_design_per_multi_hour"]
    early, late = params["cohorts"]["early_adopters"], params["cohorts"]["late_adopters"]
    assert params["true_rate_ratio"]["late_adopters"] == pytest.approx(
        late["switch_rate_expected_per_multi_hour"] / early["switch_rate_expected_per_multi_hour"])
    assert params["true_rate_ratio"]["late_adopters"] < 1
