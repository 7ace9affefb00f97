"""Heart rate: plausible range, successive-difference rules on constructed ectopic
beats, and the 1 Hz-ready series on the grid."""

from __future__ import annotations

import numpy as np
import pytest
from signal_builders import recording

from pipeline.config import HrSettings, SignalSettings
from pipeline.errors import ConfigError
from pipeline.signals import process_recording
from pipeline.signals.hr import (
    berntson_criterion,
    ectopic_by_berntson,
    ectopic_by_relative_change,
    flag_intervals,
    hr_artifact_method,
)

#: indices of the constructed artifacts in _intervals()
ARTIFACTS = {50, 51, 120, 200, 201}


def _intervals(n: int = 300) -> np.ndarray:
    """Normal sinus rhythm near 75 beats/min (800 ms, respiratory variation of 20 ms),
    with a premature beat and its compensatory pause (50, 51), a missed beat (120:
    a doubled interval) and an extra beat splitting an interval (200, 201)."""
    rng = np.random.default_rng(0)
    ibi = 800 + 20 * np.sin(np.arange(n) / 5.0) + rng.normal(0, 5, n)
    ibi[50], ibi[51] = 500.0, 1100.0
    ibi[120] = 1600.0
    ibi[200], ibi[201] = 400.0, 400.0
    return ibi


def test_the_20_percent_rule_flags_exactly_the_constructed_artifacts():
    # Malik et al. (1989/1996): successive intervals differing by more than 20 %
    ibi = _intervals()
    flagged = set(np.flatnonzero(ectopic_by_relative_change(ibi, HrSettings())).tolist())
    assert flagged == ARTIFACTS


def test_berntson_rule_flags_exactly_the_constructed_artifacts():
    # Berntson et al. (1990), Psychophysiology 27:586-598
    ibi = _intervals()
    flagged = set(np.flatnonzero(ectopic_by_berntson(ibi, HrSettings())).tolist())
    assert flagged == ARTIFACTS


def test_berntson_criterion_follows_the_published_formula():
    # QD = IQR / 2; MED = 3.32 QD; MAD = (median - 2.9 QD) / 3; criterion (MED + MAD)/2
    # (Berntson et al. 1990). Intervals 760..840 ms: Q1 780, median 800, Q3 820, so
    # QD 20, MED 66.4, MAD 247.33, criterion 156.87 ms.
    ibi = np.arange(760.0, 841.0)
    assert berntson_criterion(ibi) == pytest.approx((66.4 + (800 - 58) / 3) / 2)
    assert berntson_criterion(ibi) == pytest.approx(156.8667, abs=1e-4)


def test_plausible_range_does_not_condemn_neighbours():
    # 300-2000 ms (200-30 beats/min) is the plausible range (common practice in HRV
    # preprocessing)
    ibi = np.full(40, 800.0)
    ibi[10] = 250.0   # 240 beats/min: impossible
    ibi[30] = 2500.0  # 24 beats/min
    out_of_range, ectopic = flag_intervals(ibi, HrSettings())
    assert set(np.flatnonzero(out_of_range)) == {10, 30}
    assert not ectopic.any()


def test_heart_rate_from_intervals_on_the_grid():
    ibi = _intervals()
    beats = np.cumsum(ibi) / 1000.0
    fs = 32.0
    t = np.arange(0, beats[-1] + 1, 1 / fs)
    ibi_ch = np.full(t.size, np.nan)
    ibi_ch[np.round(beats * fs).astype(int)] = ibi
    eda = 5 + np.random.default_rng(1).normal(0, 0.003, t.size)
    out = process_recording(recording(t, eda, ibi_ms=ibi_ch), SignalSettings())
    s = out.samples
    assert out.methods["hr_source"] == "ibi_ms" and out.methods["hr_artifacts"] == "malik"
    # in the middle of interval 100 the rate is 60000 / ibi[100]
    mid = (beats[99] + beats[100]) / 2
    row = s.iloc[int(np.argmin(np.abs(s["time_s"] - mid)))]
    assert row["hr_bpm"] == pytest.approx(60000 / ibi[100], rel=1e-3)
    # the excluded premature beat and its pause (1.6 s together) are bridged
    span = (s["time_s"] > beats[49]) & (s["time_s"] < beats[51])
    assert s.loc[span, "hr_valid"].all()
    assert s.loc[span, "hr_bpm"].between(70, 80).all()
    # the 1.6 s missed-beat interval is bridged; an excluded stretch of 3.2 s would not be
    assert out.invalid_share["hr_successive_difference"] == pytest.approx(5 / 300)


def test_heart_rate_samples_with_an_impossible_value_and_a_gap():
    fs = 32.0
    t = np.arange(0, 120, 1 / fs)
    hr = np.full(t.size, np.nan)
    sec = np.arange(0, 120)
    hr[sec * 32] = 70 + 2 * np.sin(sec / 10.0)
    hr[40 * 32] = 250.0               # impossible
    hr[80 * 32: 95 * 32] = np.nan      # 15 s without samples
    eda = 5 + np.random.default_rng(2).normal(0, 0.003, t.size)
    out = process_recording(recording(t, eda, hr_bpm=hr), SignalSettings())
    s = out.samples
    assert s["hr_bpm"].max() < 80
    near = (s["time_s"] > 39) & (s["time_s"] < 41)
    assert s.loc[near, "hr_valid"].all()           # bridged across the dropped sample
    gap = (s["time_s"] > 82) & (s["time_s"] < 93)
    assert not s.loc[gap, "hr_valid"].any()
    assert np.isnan(s.loc[gap, "hr_bpm"]).all()
    assert out.invalid_share["hr_out_of_range"] == pytest.approx(1 / 105)


def test_unknown_heart_rate_method_lists_the_choices():
    with pytest.raises(ConfigError) as info:
        hr_artifact_method("kubios")
    assert "berntson" in info.value.hint and "malik" in info.value.hint
