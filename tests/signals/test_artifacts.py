"""Artifact rules: each on a constructed artifact, with its own threshold and share."""

from __future__ import annotations

import numpy as np
import pytest
from signal_builders import recording, settings

from pipeline.config import EdaSettings, SignalSettings
from pipeline.errors import ConfigError
from pipeline.signals import process_recording
from pipeline.signals.artifacts import ARTIFACT_RULES, RawEda, assess, bridged

FS = 32.0
SECONDS = 300.0


def _base(seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Five minutes of a quiet, noisy skin conductance level (no rule fires)."""
    t = np.arange(int(SECONDS * FS)) / FS
    rng = np.random.default_rng(seed)
    x = 5.0 + 0.2 * np.sin(2 * np.pi * t / 120.0) + rng.normal(0.0, 0.003, t.size)
    return t, x


def _valid_at(out, t0: float, t1: float) -> np.ndarray:
    s = out.samples
    sel = (s["time_s"] >= t0) & (s["time_s"] < t1)
    return s.loc[sel, "eda_valid"].to_numpy()


def _assert_masked(out, start: float, end: float, pad: float = 5.0) -> None:
    """Invalid over [start - pad, end + pad); valid a second beyond that."""
    assert not _valid_at(out, start - pad + 0.2, end + pad - 0.2).any()
    assert _valid_at(out, 0.0, start - pad - 1.0).all()
    assert _valid_at(out, end + pad + 1.0, SECONDS).all()
    s = out.samples
    inside = (s["time_s"] >= start) & (s["time_s"] < end)
    assert s.loc[inside, "eda_us"].isna().all()


def test_defaults_are_the_published_thresholds():
    # Kleckner et al. (2018), IEEE Trans Biomed Eng 65:1460-1467: rule 1 EDA within
    # 0.05-60 uS, rule 2 no change faster than +-10 uS/s, rule 4 data within 5 s of
    # invalid data is invalid too.
    cfg = EdaSettings()
    assert (cfg.min_us, cfg.max_us) == (0.05, 60.0)
    assert cfg.max_slope_us_per_s == 10.0
    assert cfg.pad_s == 5.0
    assert set(cfg.rules) == set(ARTIFACT_RULES)


def test_clean_recording_has_no_invalid_sample():
    t, x = _base()
    out = process_recording(recording(t, x), SignalSettings())
    assert out.samples["eda_valid"].all()
    assert out.invalid_share["total"] == 0.0
    assert all(out.invalid_share[r] == 0.0 for r in ARTIFACT_RULES)


def test_out_of_range_rule_masks_impossible_values():
    t, x = _base()
    low = (t >= 100) & (t < 130)
    high = (t >= 200) & (t < 210)
    x[low] = 0.02 + np.random.default_rng(1).normal(0, 0.003, low.sum())
    x[high] = 80.0 + np.random.default_rng(2).normal(0, 0.003, high.sum())
    out = process_recording(recording(t, x), SignalSettings())
    assert out.invalid_share["out_of_range"] == pytest.approx(40.0 / SECONDS, abs=1e-3)
    _assert_masked_two(out, (100.0, 130.0), (200.0, 210.0))
    # its own threshold: with a floor of 0.01 uS the low stretch is plausible
    lax = process_recording(recording(t, x), settings(eda={"min_us": 0.01}))
    assert lax.invalid_share["out_of_range"] == pytest.approx(10.0 / SECONDS, abs=1e-3)
    assert _valid_at(lax, 110.0, 120.0).all()


def _assert_masked_two(out, a: tuple[float, float], b: tuple[float, float]) -> None:
    assert not _valid_at(out, a[0] - 4.8, a[1] + 4.8).any()
    assert not _valid_at(out, b[0] - 4.8, b[1] + 4.8).any()
    assert _valid_at(out, 0.0, a[0] - 6.0).all()
    assert _valid_at(out, a[1] + 6.0, b[0] - 6.0).all()
    assert _valid_at(out, b[1] + 6.0, SECONDS).all()


def test_jump_rule_masks_a_step_and_its_surroundings():
    t, x = _base()
    x[t >= 150.0] += 2.0  # electrode shift: +2 uS in one sample (64 uS/s)
    out = process_recording(recording(t, x), SignalSettings())
    assert out.invalid_share["jump"] == pytest.approx(2 / t.size)
    _assert_masked(out, 150.0 - 1 / FS, 150.0 + 1 / FS)
    lax = process_recording(recording(t, x), settings(eda={"max_slope_us_per_s": 100.0}))
    assert lax.invalid_share["jump"] == 0.0


def test_flat_line_rule_masks_a_sensor_that_is_off():
    t, x = _base()
    off = (t >= 100) & (t < 130)
    x[off] = 4.2  # a constant reading: the sensor has lost contact
    out = process_recording(recording(t, x), settings(eda={"rules": ["flat_line"]}))
    assert out.invalid_share["flat_line"] == pytest.approx(30.0 / SECONDS, abs=1e-3)
    _assert_masked(out, 100.0, 130.0)
    longer = process_recording(recording(t, x), settings(eda={"flat_window_s": 40.0}))
    assert longer.invalid_share["flat_line"] == 0.0


def test_slow_drift_in_tiny_steps_is_not_a_flat_line():
    t = np.arange(int(60 * FS)) / FS
    x = 5.0 + 0.0005 * np.arange(t.size)  # every step below the tolerance, range 1 uS
    raw = RawEda(x, FS)
    assert not ARTIFACT_RULES["flat_line"](raw, EdaSettings()).any()


def test_clipping_rule_masks_readings_held_at_the_ceiling():
    t, x = _base()
    held = (t >= 100) & (t < 120)
    x[held] = 60.0  # the range end of the sensor; 60 itself is not out of range
    out = process_recording(recording(t, x), settings(eda={"rules": ["clipping"]}))
    assert out.invalid_share["clipping"] == pytest.approx(20.0 / SECONDS, abs=1e-3)
    _assert_masked(out, 100.0, 120.0)
    declared = process_recording(recording(t, x), settings(eda={"rules": ["clipping"],
                                                               "ceiling_us": 70.0}))
    assert declared.invalid_share["clipping"] == 0.0
    # a shorter hold than clip_min_s is not clipping
    brief = process_recording(recording(t, x), settings(eda={"rules": ["clipping"],
                                                            "clip_min_s": 30.0}))
    assert brief.invalid_share["clipping"] == 0.0


def test_a_held_level_below_the_data_is_not_clipping():
    t, x = _base()
    x[(t >= 100) & (t < 120)] = 4.2  # held, but most data lies above it
    raw = RawEda(x, FS)
    assert not ARTIFACT_RULES["clipping"](raw, EdaSettings()).any()


def test_motion_rule_masks_strong_accelerometer_motion():
    t, x = _base()
    rng = np.random.default_rng(5)
    acc = np.zeros((3, t.size))
    acc[2] = 1.0  # at rest: 1 g along z
    burst = (t >= 100) & (t < 108)
    acc[:, burst] += rng.normal(0.0, 0.5, (3, burst.sum()))
    rec = recording(t, x, acc_x=acc[0], acc_y=acc[1], acc_z=acc[2])
    out = process_recording(rec, SignalSettings())
    # the 1 s average trims up to half a second at each end of the burst
    assert out.invalid_share["motion"] == pytest.approx(8.0 / SECONDS, abs=1.0 / SECONDS)
    assert not _valid_at(out, 100.5, 107.5).any()
    assert "motion_g" in out.samples
    quiet = out.samples.loc[out.samples["time_s"] < 90, "motion_g"]
    assert quiet.max() < 1e-9
    lax = process_recording(rec, settings(eda={"motion_max_g": 2.0}))
    assert lax.invalid_share["motion"] == 0.0
    # without an accelerometer the rule flags nothing
    assert process_recording(recording(t, x), SignalSettings()).invalid_share["motion"] == 0.0


def test_short_glitch_is_bridged_and_stays_valid():
    t, x = _base()
    i = int(120 * FS)
    x[i] += 3.0  # a one-sample spike
    out = process_recording(recording(t, x), SignalSettings())
    assert out.invalid_share["jump"] > 0
    assert out.invalid_share["total"] == 0.0
    assert out.invalid_share["interpolated"] == pytest.approx(3 / t.size)
    near = out.samples[(out.samples["time_s"] > 119) & (out.samples["time_s"] < 121)]
    assert near["eda_us"].max() < x[i - 64: i + 64].mean() + 0.05  # no spike left
    assert len(out.scrs) == 0


def test_missing_samples_short_gaps_bridged_long_ones_masked():
    t, x = _base()
    x[(t >= 60) & (t < 61)] = np.nan   # 1 s: bridged (max_interp_s 2 s)
    x[(t >= 150) & (t < 160)] = np.nan  # 10 s: invalid, padded
    out = process_recording(recording(t, x), SignalSettings())
    assert _valid_at(out, 55.0, 66.0).all()
    _assert_masked(out, 150.0, 160.0)
    strict = process_recording(recording(t, x), SignalSettings(max_interp_s=0.0))
    assert not _valid_at(strict, 60.2, 60.8).any()


def test_shares_add_up():
    t, x = _base()
    x[(t >= 100) & (t < 130)] = 4.2
    raw = RawEda(x, FS)
    v = assess(raw, EdaSettings(rules=["flat_line"]), max_interp_s=2.0)
    flagged = v.shares["flat_line"]
    assert v.shares["total"] == pytest.approx(flagged + v.shares["transition"], abs=1e-9)
    assert v.shares["transition"] == pytest.approx(10.0 / SECONDS, abs=2 / t.size)


def test_rules_can_be_switched_off_and_unknown_rules_refused():
    t, x = _base()
    x[t >= 150.0] += 2.0
    out = process_recording(recording(t, x), settings(eda={"rules": ["out_of_range"]}))
    assert "jump" not in out.invalid_share
    assert out.samples["eda_valid"].all()
    with pytest.raises(ConfigError, match="did you mean 'flat_line'"):
        from pipeline.config import parse_config
        parse_config({"signals": {"eda": {"rules": ["flatline"]}}})


def test_all_invalid_recording_does_not_crash():
    t = np.arange(0, 60, 1 / FS)
    out = process_recording(recording(t, np.zeros(t.size)), SignalSettings())
    assert not out.samples["eda_valid"].any()
    assert out.invalid_share["out_of_range"] == 1.0
    assert len(out.scrs) == 0


def _motion_by_loop(m: np.ndarray, fs: float, cfg: EdaSettings) -> np.ndarray:
    """The motion rule written out one sample at a time (the reference)."""
    n = m.size
    w = max(1, round(cfg.motion_window_s * fs))
    out = np.zeros(n, dtype=bool)
    for i in range(n):
        lo = max(i - w // 2, 0)
        window = m[lo: min(lo + w, n)]
        window = window[np.isfinite(window)]
        out[i] = window.size > 0 and window.mean() > cfg.motion_max_g
    return out


@pytest.mark.parametrize("n", [0, 1, 5, 31, 32, 33, 200, 1000])
@pytest.mark.parametrize("fs", [4.0, 32.0])
def test_motion_rule_matches_a_sample_by_sample_average(n, fs):
    rng = np.random.default_rng(n)
    m = np.abs(rng.normal(0.0, 0.35, n))
    m[rng.random(n) < 0.15] = np.nan  # missing samples are left out of the average
    m[n // 2: n // 2 + 40] = np.nan    # and a gap longer than the window
    cfg = EdaSettings(motion_window_s=1.0, motion_max_g=0.3)
    raw = RawEda(np.full(n, 5.0), fs, m)
    got = ARTIFACT_RULES["motion"](raw, cfg)
    assert got.dtype == bool and got.shape == (n,)
    assert np.array_equal(got, _motion_by_loop(m, fs, cfg))


def test_bridging_in_place_fills_the_array_itself():
    _, x = _base()
    x[1000:1010] = np.nan  # a short gap: bridged
    x[3000:3400] = np.nan  # a long one: bridged for filtering, masked later
    validity = assess(RawEda(x, FS), EdaSettings(), 2.0)
    copy = bridged(x, validity)
    assert np.isnan(x).any()  # the copy leaves x alone
    filled = bridged(x, validity, in_place=True)
    assert filled is x
    assert np.array_equal(filled, copy)
    assert np.isfinite(filled).all()
