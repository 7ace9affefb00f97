"""Binning sensor samples onto video seconds through the clock map."""

import numpy as np
import pandas as pd
import pytest

from pipeline.align.timeline import build_timeline
from pipeline.config import SignalSettings
from pipeline.errors import StageError
from pipeline.metrics.states import classify_states
from pipeline.types import TEXT, TIMELINE_COLUMNS, SessionInputs, SessionKey, SessionSignals


def _inputs(duration, pairs, codes=None):
    if codes is None:
        codes = pd.DataFrame({"second": np.arange(duration), "in_view": "tv", "attended": "tv"})
    return SessionInputs(key=SessionKey("p1", "s1"), cohort="a", duration_s=duration,
                         codes=codes, coder="", sync_pairs=np.asarray(pairs, float).reshape(-1, 2),
                         recording_path=None, platform_groups={"tv": "screen"})


def _signals(time_s, eda, valid=None, fs=4.0, scrs=None):
    valid = np.ones(len(time_s), bool) if valid is None else valid
    samples = pd.DataFrame({"time_s": time_s, "eda_us": eda, "eda_tonic_us": eda,
                            "eda_phasic_us": 0.0, "eda_valid": valid})
    if scrs is None:
        scrs = pd.DataFrame(columns=["onset_s", "peak_s", "amplitude_us", "rise_time_s",
                                     "half_recovery_s"], dtype=float)
    return SessionSignals(samples=samples, scrs=scrs, invalid_share={}, methods={},
                          sampling_rate_hz=fs)


def test_offset_shifts_samples_into_the_right_video_second():
    # Sensor clock 10 s ahead (one pair video 0 <-> sensor 10). Samples at 4 Hz whose
    # value equals floor(sensor time); video second k holds sensor times 10+k .. 11+k,
    # so its mean is 10 + k.
    t = np.arange(0, 40, 0.25)
    sig = _signals(t, np.floor(t) + 1.0)
    a = build_timeline(_inputs(20, [[0.0, 10.0]]), sig, SignalSettings())
    assert a.timeline["eda_us"].to_numpy() == pytest.approx(np.arange(20) + 11.0)
    assert a.timeline["signal_valid"].all()


def test_drift_maps_late_samples_back():
    # sensor = 1.01 * video (10000 ppm, exaggerated). The sample at sensor 101.0 s is
    # video 100.0 s and must land in second 100, not 101.
    t = np.arange(0, 130, 0.25)
    eda = np.where(np.isclose(t, 101.0), 50.0, 5.0)
    sig = _signals(t, eda)
    a = build_timeline(_inputs(120, [[0, 0], [100, 101]]), sig, SignalSettings())
    # second 100 holds sensor 101.0 .. 102.01: samples 101.0, 101.25, 101.5, 101.75, 102.0
    # mean = (50 + 4 * 5) / 5 = 14
    assert a.timeline.loc[100, "eda_us"] == pytest.approx(14.0)
    assert a.clock.drift_ppm == pytest.approx(10000.0)


def test_second_with_too_few_valid_samples_is_invalid():
    t = np.arange(0, 10, 0.25)
    valid = np.ones(len(t), bool)
    valid[8:11] = False  # second 2 keeps 1 of 4 samples: 25 % < 50 % -> invalid
    sig = _signals(t, np.full(len(t), 5.0), valid)
    tl = build_timeline(_inputs(10, []), sig, SignalSettings()).timeline
    assert list(tl["signal_valid"]) == [True, True, False] + [True] * 7
    assert np.isnan(tl.loc[2, "eda_us"])


def test_uncoded_seconds_stay_uncoded_and_scrs_are_counted():
    codes = pd.DataFrame({"second": [0, 1, 3], "in_view": ["tv", "phone;tv", ""],
                          "attended": ["tv", "phone", ""]})
    scrs = pd.DataFrame({"onset_s": [1.5, 1.9, 3.2], "peak_s": [3.0, 3.4, 5.0],
                         "amplitude_us": [0.2, 0.3, 0.5], "rise_time_s": [1.5, 1.5, 1.8],
                         "half_recovery_s": [3.0, np.nan, 2.5]})
    t = np.arange(0, 4, 0.25)
    sig = _signals(t, np.full(len(t), 5.0), scrs=scrs)
    tl = build_timeline(_inputs(4, [], codes), sig, SignalSettings()).timeline
    assert list(tl["coded"]) == [True, True, False, True]
    assert list(tl["state"].astype(object).fillna("NA")) == ["single", "multi", "NA", "none"]
    assert list(tl["scr_onsets"]) == [0, 2, 0, 1]
    assert tl["scr_amplitude_sum_us"].to_numpy() == pytest.approx([0, 0.5, 0, 0.5])


def test_no_recording_gives_invalid_signal_and_a_flag():
    a = build_timeline(_inputs(5, []), None, SignalSettings())
    assert not a.timeline["signal_valid"].any()
    assert "no_recording" in a.flags


def test_backwards_clock_is_a_stage_error():
    with pytest.raises(StageError, match="runs backwards"):
        build_timeline(_inputs(5, [[0, 100], [100, 0]]), None, SignalSettings())


def test_heart_rate_sampled_once_a_second_is_valid_beside_faster_eda():
    # EDA at 4 Hz, HR once a second (NaN between): every second holds one HR value.
    t = np.arange(0, 5, 0.25)
    sig = _signals(t, np.full(len(t), 5.0))
    hr = np.where(np.isclose(t % 1, 0), 60.0 + t, np.nan)
    sig.samples["hr_bpm"] = hr
    sig.samples["hr_valid"] = np.isfinite(hr)
    tl = build_timeline(_inputs(5, []), sig, SignalSettings()).timeline
    assert tl["hr_valid"].all()
    assert tl["hr_bpm"].to_numpy() == pytest.approx([60, 61, 62, 63, 64])


def _codes_by_merge(inputs):
    """The codes part of the timeline the plain way (the reference): a left merge of
    the codes on the seconds, text columns as strings, states per row."""
    frame = pd.DataFrame({"second": np.arange(inputs.duration_s, dtype=np.int64)})
    frame = frame.merge(inputs.codes[["second", "in_view", "attended"]], on="second",
                        how="left", validate="one_to_one")
    frame["coded"] = frame["in_view"].notna()
    frame["in_view"] = frame["in_view"].astype(TEXT)
    frame["attended"] = frame["attended"].astype(TEXT)
    return pd.concat([frame, classify_states(frame["in_view"])], axis=1)


@pytest.mark.parametrize("as_category", [False, True])
def test_codes_are_spread_to_seconds_as_a_merge_would(as_category):
    codes = pd.DataFrame({
        "second": [7, 0, 1, 3, 4, 5, 6, 9, 12, -1],  # 9, 12, -1 lie outside the session
        "in_view": ["tv", "phone;tv", "", None, "book;phone;tv", "tv", np.nan, "tv", "tv",
                    "tv"],
        "attended": ["tv", "phone", "", "tv", None, "", "tv", "tv", "tv", "tv"],
    })
    if as_category:
        codes = codes.astype({"in_view": "category", "attended": "category"})
    inputs = _inputs(9, [], codes)
    tl = build_timeline(inputs, None, SignalSettings()).timeline
    expect = _codes_by_merge(inputs)
    pd.testing.assert_frame_equal(tl[expect.columns], expect)
    assert list(tl["coded"]) == [True, True, False, False, True, True, False, True, False]


def test_a_session_without_codes_is_uncoded_throughout():
    codes = pd.DataFrame({"second": np.zeros(0, dtype=np.int64),
                          "in_view": np.zeros(0, dtype=object),
                          "attended": np.zeros(0, dtype=object)})
    inputs = _inputs(4, [], codes)
    tl = build_timeline(inputs, None, SignalSettings()).timeline
    expect = _codes_by_merge(inputs)
    pd.testing.assert_frame_equal(tl[expect.columns], expect)
    assert not tl["coded"].any()


def test_a_second_coded_twice_is_a_stage_error():
    codes = pd.DataFrame({"second": [0, 1, 1], "in_view": ["tv", "tv", "phone"],
                          "attended": ["tv", "tv", "phone"]})
    with pytest.raises(StageError, match="twice"):
        build_timeline(_inputs(3, [], codes), None, SignalSettings())


def test_timeline_columns_and_types_are_fixed():
    t = np.arange(0, 6, 0.25)
    scrs = pd.DataFrame({"onset_s": [1.5], "peak_s": [3.0], "amplitude_us": [0.2],
                         "rise_time_s": [1.5], "half_recovery_s": [3.0]})
    sig = _signals(t, np.full(t.size, 5.0), scrs=scrs)
    with_signals = build_timeline(_inputs(5, []), sig, SignalSettings()).timeline
    without = build_timeline(_inputs(5, []), None, SignalSettings()).timeline
    no_scrs = build_timeline(_inputs(5, []), _signals(t, np.full(t.size, 5.0)),
                             SignalSettings()).timeline
    # one declared order, with or without a recording
    for tl in (with_signals, without, no_scrs):
        assert list(tl.columns) == list(TIMELINE_COLUMNS)
    for tl in (with_signals, without, no_scrs):
        types = {c: str(t) for c, t in tl.dtypes.items()}
        assert {str(tl[c].dtype.storage) for c in ("participant_id", "session_id", "in_view",
                                                   "attended", "state", "fine_state")} \
            == {"pyarrow"}
        assert types["second"] == types["scr_onsets"] == "int64"
        text = ("participant_id", "session_id", "in_view", "attended", "state", "fine_state")
        assert {types[c] for c in text} == {"string"}
        assert types["n_in_view"] == "Int64"
        assert types["coded"] == types["signal_valid"] == types["hr_valid"] == "bool"
        assert {types[c] for c in ("sensor_s", "eda_us", "eda_tonic_us", "eda_phasic_us",
                                   "hr_bpm", "motion_g", "scr_amplitude_sum_us",
                                   "arousal")} == {"float64"}
        assert isinstance(tl.index, pd.RangeIndex)
