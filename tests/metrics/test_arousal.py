"""Arousal z-scores and their per-state summary on hand-made timelines."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from metrics_timelines import build_timeline
from pipeline.config import ArousalSettings
from pipeline.metrics.arousal import (
    FLAG_NOT_STANDARDISED,
    add_arousal,
    arousal_source,
    compression_ratio,
    standardise_participant,
    state_arousal,
    zscore_stats,
)

CFG = ArousalSettings()


# -------------------------------------------------------------------------- z-scores
def test_source_chooses_level_or_phasic():
    tl = build_timeline("tt", eda=[4.0, 6.0])  # builder: phasic = 0.1 * eda
    assert arousal_source(tl, CFG).tolist() == [4.0, 6.0]
    np.testing.assert_allclose(arousal_source(tl, ArousalSettings(source="phasic")), [.4, .6])


def test_zscore_stats_pool_the_valid_seconds_of_all_sessions():
    # Session 1: 1, 2, 3 valid, 100 invalid; session 2: 4, 5 (second 1 uncoded, still
    # counted: validity, not coding, decides). Pooled 1..5: mean 3,
    # sd = sqrt(((1-3)^2 + (2-3)^2 + 0 + 1 + 4) / 4) = sqrt(10 / 4) = 1.5811.
    s1 = build_timeline("tttt", eda=[1, 2, 3, 100], valid="1110")
    s2 = build_timeline("t?", eda=[4, 5], session_id="s2")
    mean, sd, n = zscore_stats([s1, s2], CFG)
    assert (mean, n) == (3.0, 5)
    assert sd == pytest.approx(np.sqrt(2.5), rel=1e-12)
    assert sd == pytest.approx(np.std([1, 2, 3, 4, 5], ddof=1), rel=1e-12)
    out = add_arousal(s1, mean, sd, CFG, n=n)
    np.testing.assert_allclose(out["arousal"][:3], (np.array([1, 2, 3]) - 3) / np.sqrt(2.5))
    assert np.isnan(out["arousal"].iloc[3])  # invalid signal
    assert FLAG_NOT_STANDARDISED not in out.attrs["flags"]
    both = standardise_participant([s1, s2], CFG)
    np.testing.assert_allclose(both[1]["arousal"], (np.array([4, 5]) - 3) / np.sqrt(2.5))


def test_constant_signal_cannot_be_standardised():
    tl = build_timeline("ttt", eda=[5, 5, 5])
    mean, sd, n = zscore_stats([tl], CFG)
    assert sd == 0 and n == 3
    out = add_arousal(tl, mean, sd, CFG, n=n)
    assert out["arousal"].isna().all()
    assert out.attrs["flags"] == [FLAG_NOT_STANDARDISED]


def test_one_valid_second_cannot_be_standardised():
    tl = build_timeline("tt", eda=[5, 6], valid="10")
    mean, sd, n = zscore_stats([tl], CFG)
    assert n == 1 and np.isnan(sd)
    out = add_arousal(tl, mean, sd, CFG, n=n)
    assert out["arousal"].isna().all() and FLAG_NOT_STANDARDISED in out.attrs["flags"]


def test_add_arousal_leaves_its_input_as_it_was():
    # the result shares the input's other columns (a shallow copy): adding arousal and
    # flags to it must change neither the input's values nor its attrs
    tl = build_timeline("tttt", eda=[1, 2, 3, 4], valid="1101")
    tl.attrs["flags"] = ["earlier_flag"]
    before = tl.copy(deep=True)
    out = add_arousal(tl, 2.0, 1.0, CFG, n=4)
    np.testing.assert_allclose(out["arousal"], [-1.0, 0.0, np.nan, 2.0])
    pd.testing.assert_frame_equal(tl, before)
    assert tl.attrs == {"flags": ["earlier_flag"]}
    lost = add_arousal(tl, 2.0, 0.0, CFG)  # sd 0: not standardised, flag added
    assert lost.attrs["flags"] == ["earlier_flag", FLAG_NOT_STANDARDISED]
    assert tl.attrs == {"flags": ["earlier_flag"]}
    pd.testing.assert_frame_equal(tl, before)


# ------------------------------------------------------------------ state summaries
def _state_example():
    # seconds 0-11 single (tv), 5 invalid; 12-17 multi (phone + tv); 18-20 none;
    # 21 uncoded.
    spec = "t" * 12 + "p" * 6 + "..." + "?"
    in_view = ["tv"] * 12 + ["phone;tv"] * 6 + [""] * 3 + [None]
    valid = "11111011111111111111" + "11"
    arousal = np.r_[[0, 1, 2, 3, 4, np.nan, 5, 6, 7, 8, 9, 10],
                    [-1, 0.5, 2, 2, 3, 10], [1, 1, 1], [50]]
    onsets = np.zeros(22, int)
    amp = np.zeros(22)
    onsets[[1, 5, 7]] = [1, 2, 2]
    amp[[1, 5, 7]] = [0.3, 1.0, 0.5]
    hr = np.full(22, 70.0)
    hr[12:18] = 80.0
    hr[12] = 200.0
    hr_valid = np.array([c == "1" for c in valid])
    hr_valid[12] = False
    return build_timeline(spec, in_view=in_view, valid=valid, arousal=arousal,
                          scr_onsets=onsets, scr_amplitude=amp, hr=hr, hr_valid=hr_valid)


def test_state_arousal_by_hand_and_against_numpy():
    tl = _state_example()
    cfg = ArousalSettings(min_state_minutes=0.1)  # 6 valid seconds needed
    s = state_arousal(tl, cfg).set_index("state")
    assert list(s.index) == ["none", "single", "multi"]
    assert s["seconds"].tolist() == [3, 12, 6]
    assert s["valid_seconds"].tolist() == [3, 11, 6]
    assert s["enough_valid_time"].tolist() == [False, True, True]
    # single: 0..10 (11 values); numpy linear percentile: rank 0.05 * 10 = 0.5 -> 0.5,
    # rank 9.5 -> 9.5; range 9; mean 5.
    assert s.loc["single", ["arousal_mean", "arousal_p05", "arousal_p95", "arousal_range"]
                 ].tolist() == pytest.approx([5, 0.5, 9.5, 9])
    # multi sorted -1, .5, 2, 2, 3, 10: rank 0.25 -> -1 + .25 * 1.5 = -0.625;
    # rank 4.75 -> 3 + .75 * 7 = 8.25; range 8.875; mean 16.5 / 6 = 2.75.
    m = [-1, 0.5, 2, 2, 3, 10]
    assert s.loc["multi", "arousal_p05"] == pytest.approx(-0.625)
    assert s.loc["multi", "arousal_p95"] == pytest.approx(8.25)
    assert s.loc["multi", "arousal_p05"] == pytest.approx(np.percentile(m, 5))  # numpy ref
    assert s.loc["multi", "arousal_p95"] == pytest.approx(np.percentile(m, 95))
    assert s.loc["multi", "arousal_mean"] == pytest.approx(2.75)
    assert s.loc["multi", "arousal_range"] == pytest.approx(8.875)
    # none: 3 valid seconds < 6 -> nothing filled
    assert s.loc["none", ["arousal_mean", "arousal_p05", "arousal_p95",
                          "arousal_range"]].isna().all()
    # SCRs, single: onsets at 1 (1) and 7 (2) count, at 5 (invalid) not: 3 onsets in
    # 11 valid seconds = 3 / (11 / 60) per minute; amplitude (0.3 + 0.5) / 3.
    assert s.loc["single", "scr_per_min"] == pytest.approx(3 / (11 / 60))
    assert s.loc["single", "scr_amplitude_mean_us"] == pytest.approx(0.8 / 3)
    assert s.loc["multi", "scr_per_min"] == 0
    assert np.isnan(s.loc["multi", "scr_amplitude_mean_us"])
    # HR: multi mean 80 (the 200 bpm second is not valid); single 70 over 11 seconds.
    assert s.loc["multi", "hr_mean_bpm"] == 80
    assert s.loc["multi", "hr_valid_seconds"] == 5
    assert s.loc["single", "hr_mean_bpm"] == 70
    # compression ratio = 8.875 / 9
    assert compression_ratio(s.reset_index()) == pytest.approx(8.875 / 9)


def test_min_state_minutes_boundary():
    tl = _state_example()
    # single has 11 valid seconds: 11/60 minutes is just enough, 12/60 is not.
    s = state_arousal(tl, ArousalSettings(min_state_minutes=11 / 60)).set_index("state")
    assert s.loc["single", "enough_valid_time"]
    s = state_arousal(tl, ArousalSettings(min_state_minutes=12 / 60)).set_index("state")
    assert not s.loc["single", "enough_valid_time"]
    assert np.isnan(s.loc["single", "arousal_range"])
    assert np.isnan(compression_ratio(s.reset_index()))
    # default 10 minutes: nothing in this 22-s session is enough
    s = state_arousal(tl, CFG)
    assert not s["enough_valid_time"].any() and s["arousal_range"].isna().all()


def test_all_states_present_even_when_absent():
    tl = build_timeline("tttt")
    s = state_arousal(tl, ArousalSettings(min_state_minutes=0))
    assert s["state"].tolist() == ["none", "single", "multi"]
    assert s["seconds"].tolist() == [0, 4, 0]
    assert np.isnan(s.set_index("state").loc["multi", "scr_per_min"])


def test_compression_ratio_edge_cases():
    def states(single, multi):
        return pd.DataFrame({"state": ["none", "single", "multi"],
                             "arousal_range": [np.nan, single, multi]})
    assert compression_ratio(states(2.0, 1.0)) == 0.5
    assert np.isnan(compression_ratio(states(0.0, 1.0)))
    assert np.isnan(compression_ratio(states(np.nan, 1.0)))
    assert np.isnan(compression_ratio(states(1.0, np.nan)))


def test_state_arousal_needs_the_arousal_column():
    from pipeline.errors import StageError
    tl = build_timeline("tt").drop(columns="arousal")
    with pytest.raises(StageError, match="arousal"):
        state_arousal(tl, CFG)
