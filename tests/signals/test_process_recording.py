"""The stage's contract: what process_recording hands the align stage."""

from __future__ import annotations

import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from signal_builders import recording, scr_train

from pipeline.config import SignalSettings
from pipeline.ingest.recordings import read_recording
from pipeline.signals import (
    block_mean,
    describe_methods,
    motion_magnitude,
    process_recording,
)
from pipeline.signals.grid import make_grid, to_grid
from pipeline.signals.scr import SCR_COLUMNS

DEMO = Path(__file__).resolve().parents[2] / "synthetic_diaries" / "demo"


def _rec(seconds: float = 300.0, fs: float = 32.0, t0: float = 1000.0):
    onsets = np.arange(20.0, seconds - 20, 30.0)
    t, x = scr_train(seconds, fs, onsets, np.full(onsets.size, 0.3), noise_sd_us=0.003)
    return recording(t + t0, x), onsets + t0


def test_samples_scrs_shares_and_methods_follow_the_contract():
    rec, onsets = _rec()
    before = rec.channels["eda_us"].copy()
    out = process_recording(rec, SignalSettings())
    s = out.samples
    assert list(s.columns) == ["time_s", "eda_us", "eda_tonic_us", "eda_phasic_us", "eda_valid"]
    assert s["eda_valid"].dtype == bool
    assert out.sampling_rate_hz == 8.0
    assert s["time_s"].iloc[0] == 1000.0  # the sensor clock is kept
    assert np.allclose(np.diff(s["time_s"]), 1 / 8)
    assert s["time_s"].iloc[-1] <= rec.time_s[-1]
    assert list(out.scrs.columns) == SCR_COLUMNS
    assert (out.scrs.dtypes == float).all()
    assert out.scrs["onset_s"].to_numpy() == pytest.approx(onsets, abs=0.5)
    assert all(0.0 <= v <= 1.0 for v in out.invalid_share.values())
    assert out.methods == {"eda_artifact_rules": "out_of_range,flat_line,jump,clipping,motion",
                           "eda_lowpass": "butterworth", "eda_decomposition": "highpass",
                           "scr_scoring": "trough_to_peak"}
    np.testing.assert_array_equal(rec.channels["eda_us"], before)  # input untouched


def test_slow_recordings_keep_their_rate_and_a_lower_cut_off():
    rec, _ = _rec(fs=4.0)
    out = process_recording(rec, SignalSettings())
    assert out.sampling_rate_hz == 4.0
    assert any("cut-off lowered to 1.6 Hz" in n for n in out.notes)


def test_phasic_arousal_source_has_its_column():
    # [arousal] source = "phasic" uses eda_phasic_us; it is zero-mean outside responses
    rec, _ = _rec()
    s = process_recording(rec, SignalSettings()).samples
    assert abs(s["eda_phasic_us"].median()) < 0.05
    assert (s["eda_tonic_us"] + s["eda_phasic_us"] - s["eda_us"]).abs().max() < 1e-9


def test_methods_text_names_the_references():
    rec, _ = _rec()
    lines = describe_methods(process_recording(rec, SignalSettings()).methods)
    text = " ".join(lines)
    assert "Kleckner et al. (2018)" in text and "Boucsein et al. (2012)" in text
    assert "Braithwaite et al. (2013)" in text
    convex = describe_methods({"eda_decomposition": "convex;highpass"})
    assert any("Greco et al. (2016)" in line for line in convex)


def test_peak_memory_is_within_three_times_the_recording():
    # the performance target of the issue, at one hour instead of ten (tracemalloc)
    rec, _ = _rec(seconds=3600.0, t0=0.0)
    tracemalloc.start()
    process_recording(rec, SignalSettings())
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak <= 3 * rec.nbytes


def test_demo_figures_lie_in_the_handbooks_typical_ranges():
    # Dawson, Schell & Filion, "The electrodermal system", Handbook of Psychophysiology:
    # skin conductance level 2-20 uS, SCR amplitude 0.1-1.0 uS, 1-3 non-specific SCRs
    # per minute; rise time 1-3 s and half-recovery 2-10 s (from memory).
    rows = []
    files = sorted((DEMO / "signals").glob("*.parquet"))
    assert files
    for path in files:
        out = process_recording(read_recording(path, SignalSettings()), SignalSettings())
        s = out.samples[out.samples["eda_valid"]]
        minutes = len(s) / out.sampling_rate_hz / 60.0
        rows.append({"scl": s["eda_tonic_us"].median(),
                     "amplitude": out.scrs["amplitude_us"].median(),
                     "per_min": len(out.scrs) / minutes,
                     "rise": out.scrs["rise_time_s"].median(),
                     "half": out.scrs["half_recovery_s"].median()})
    d = pd.DataFrame(rows)
    assert d["scl"].between(2.0, 20.0).all()
    assert d["amplitude"].between(0.1, 1.0).all()
    assert 1.0 <= d["per_min"].median() <= 3.0
    assert 1.0 <= d["rise"].median() <= 3.0
    assert 2.0 <= d["half"].median() <= 10.0


@pytest.mark.parametrize("step", [1, 3, 4, 8, 25])
def test_block_mean_is_the_mean_of_each_block_ignoring_missing_samples(step):
    rng = np.random.default_rng(step)
    a = rng.normal(0.2, 0.1, 1003)
    a[rng.random(a.size) < 0.2] = np.nan
    a[100:150] = np.nan  # whole blocks missing
    got = block_mean(a, step)
    starts = np.arange(0, a.size, step)
    assert got.size == starts.size
    for i, s in enumerate(starts):
        block = a[s: s + step]
        if np.isnan(block).all():
            assert np.isnan(got[i])
        else:
            assert got[i] == pytest.approx(np.nanmean(block), rel=1e-12)


def test_motion_magnitude_is_the_deviation_of_the_acceleration_from_1_g():
    rng = np.random.default_rng(3)
    t = np.arange(2000) / 32.0
    acc = {a: rng.normal(0.0, 0.6, t.size) for a in ("acc_x", "acc_y", "acc_z")}
    acc["acc_x"][500:510] = np.nan  # short gap: bridged on the grid
    acc["acc_y"][900:1200] = np.nan  # long gap: no magnitude there
    rec = recording(t, np.full(t.size, 5.0), **acc)
    before = {a: v.copy() for a, v in acc.items()}
    grid = make_grid(rec.time_s, None)
    got = motion_magnitude(rec, grid, 2.0)
    x, y, z = (to_grid(grid, rec.time_s, rec.channels[a], 2.0) for a in acc)
    expect = np.abs(np.hypot(np.hypot(x, y), z) - 1.0)
    assert np.allclose(got, expect, rtol=1e-12, atol=1e-15, equal_nan=True)
    assert np.isnan(got[900:1200]).all() and np.isfinite(got[500:510]).all()
    for a in acc:  # the recording's own arrays are left alone
        assert np.array_equal(rec.channels[a], before[a], equal_nan=True)
    assert motion_magnitude(recording(t, np.full(t.size, 5.0)), grid, 2.0) is None
