"""The sync mapping (CONTRACT §1 sync.csv): offset from one pair, offset and drift from more."""

import numpy as np
import pytest

from pipeline.align.clock import fit_clock_map


def test_no_pairs_aligns_at_zero_and_is_flagged():
    m = fit_clock_map(np.empty((0, 2)))
    assert (m.offset_s, m.rate, m.n_pairs) == (0.0, 1.0, 0)
    assert "no_sync_aligned_at_zero" in m.flags()


def test_one_pair_gives_the_offset_only():
    # tap seen at video 10 s and sensor 14.5 s: the sensor clock is 4.5 s ahead
    m = fit_clock_map(np.array([[10.0, 14.5]]))
    assert m.offset_s == pytest.approx(4.5)
    assert m.rate == 1.0
    assert np.isnan(m.residual_s)
    assert m.to_video(np.array([14.5, 104.5])) == pytest.approx([10.0, 100.0])


def test_two_pairs_give_offset_and_drift_exactly():
    # sensor = 2 + (1 + 50e-6) * video: 50 ppm fast, 2 s ahead.
    # At video 0 s -> sensor 2.0; at video 7200 s -> 2 + 7200 * 1.00005 = 7202.36
    m = fit_clock_map(np.array([[0.0, 2.0], [7200.0, 7202.36]]))
    assert m.offset_s == pytest.approx(2.0, abs=1e-9)
    assert m.drift_ppm == pytest.approx(50.0, rel=1e-6)
    assert np.isnan(m.residual_s)  # two points fit exactly; no residual to speak of


def test_three_pairs_least_squares_and_rms_residual():
    # Points (0, 1), (100, 101.2), (200, 200.8): least squares by hand.
    # mean video 100, mean sensor 101; Sxy = (-100)(-100) + 0 + (100)(99.8) = 19980,
    # Sxx = 20000 -> rate 0.999; offset = 101 - 0.999 * 100 = 1.1.
    # residuals: 1 - 1.1 = -0.1; 101.2 - 101.0 = 0.2; 200.8 - 200.9 = -0.1
    # RMS = sqrt((0.01 + 0.04 + 0.01) / 3) = sqrt(0.02)
    m = fit_clock_map(np.array([[0.0, 1.0], [100.0, 101.2], [200.0, 200.8]]))
    assert m.rate == pytest.approx(0.999)
    assert m.offset_s == pytest.approx(1.1)
    assert m.residual_s == pytest.approx(np.sqrt(0.02))


def test_implausible_drift_is_flagged():
    m = fit_clock_map(np.array([[0.0, 0.0], [1000.0, 1002.0]]))  # 2000 ppm
    assert "implausible_clock_drift" in m.flags()
