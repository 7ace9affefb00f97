"""The uniform grid: regular recordings kept as they are, irregular ones resampled,
never interpolated across more than max_interp_s."""

from __future__ import annotations

import numpy as np
import pytest
from signal_builders import recording

from pipeline.config import SignalSettings
from pipeline.signals import process_recording
from pipeline.signals.grid import interp_within, make_grid, to_grid


def test_regular_time_axis_is_kept_as_it_is():
    t = 12.5 + np.arange(1000) / 32.0
    g = make_grid(t, None)
    assert g.same_as_input and g.fs == pytest.approx(32.0) and g.n == 1000
    assert g.times(t) is t
    x = np.sin(t)
    assert to_grid(g, t, x, 2.0) is x


def test_jittered_axis_is_resampled_to_its_median_rate():
    rng = np.random.default_rng(0)
    steps = 1 / 32 + rng.uniform(-0.004, 0.004, 3199)
    t = np.r_[0.0, np.cumsum(steps)]
    g = make_grid(t, None)
    assert not g.same_as_input
    assert g.fs == pytest.approx(32.0, rel=0.01)
    x = 3.0 + 0.5 * np.sin(t)
    y = to_grid(g, t, x, 2.0)
    # linear interpolation of a smooth signal (numpy.interp as the reference)
    assert np.allclose(y, np.interp(g.times(), t, x))


def test_gaps_longer_than_max_interp_stay_empty():
    t = np.r_[np.arange(0, 10, 0.125), np.arange(11.5, 20, 0.125), np.arange(25, 30, 0.125)]
    x = np.ones(t.size)
    g = make_grid(t, 8.0)
    y = to_grid(g, t, x, 2.0)
    times = g.times()
    assert np.isfinite(y[(times > 10) & (times < 11.5)]).all()   # 1.5 s gap: bridged
    assert np.isnan(y[(times > 20) & (times < 25)]).all()        # 5 s gap: not
    assert np.isfinite(y[times >= 25]).all()


def test_missing_samples_on_a_regular_axis():
    t = np.arange(0, 60, 1 / 8)
    x = np.linspace(4, 5, t.size)
    x[80:88] = np.nan     # 1 s
    x[200:260] = np.nan   # 7.5 s
    y = to_grid(make_grid(t, None), t, x, 2.0)
    assert np.allclose(y[80:88], np.linspace(4, 5, t.size)[80:88])
    assert np.isnan(y[200:260]).all()
    assert np.isnan(x[80:88]).all()  # the recording itself is not modified


def test_interp_within_matches_numpy_inside_the_reach():
    tx = np.array([0.0, 1.0, 2.0, 6.0, 7.0])
    vx = np.array([1.0, 2.0, 3.0, 7.0, 8.0])
    t = np.array([-1.0, 0.0, 0.5, 1.5, 3.0, 6.5, 7.0, 8.0])
    out = interp_within(t, tx, vx, 2.0)
    expect = np.array([np.nan, 1.0, 1.5, 2.5, np.nan, 7.5, 8.0, np.nan])
    assert np.allclose(out, expect, equal_nan=True)


def test_irregular_recording_is_processed_on_a_uniform_grid():
    rng = np.random.default_rng(1)
    t = np.r_[0.0, np.cumsum(1 / 16 + rng.uniform(-0.01, 0.01, 16 * 120 - 1))]
    x = 6.0 + 0.01 * np.sin(t) + rng.normal(0, 0.003, t.size)
    out = process_recording(recording(t, x), SignalSettings())
    assert any("resampled" in n for n in out.notes)
    steps = np.diff(out.samples["time_s"].to_numpy())
    assert np.allclose(steps, steps[0])
    assert out.samples["eda_valid"].all()


def test_copy_gives_a_channel_of_its_own():
    t = np.arange(100) / 4.0
    x = np.linspace(1.0, 2.0, t.size)
    grid = make_grid(t, None)
    assert to_grid(grid, t, x, 2.0) is x  # complete: handed back as it is
    own = to_grid(grid, t, x, 2.0, copy=True)
    assert not np.shares_memory(own, x)
    assert np.array_equal(own, x)
