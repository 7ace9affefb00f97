"""Filtering: block-wise zero-phase filtering equals scipy's, the decimator equals
its definition, and the low-pass moves nothing in time."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal as sps

from pipeline.config import EdaSettings
from pipeline.signals.eda import decimate_cic, effective_lowpass_hz, lowpass_butterworth
from pipeline.signals.filters import butterworth, filtfilt_blocks


@pytest.mark.parametrize("btype,cutoff,fs", [("lowpass", 3.0, 32.0), ("highpass", 0.05, 8.0)])
def test_blockwise_filtering_equals_scipy_sosfiltfilt(btype, cutoff, fs):
    # scipy.signal.sosfiltfilt on the whole series is the reference
    rng = np.random.default_rng(0)
    x = np.cumsum(rng.normal(size=700_000)) * 0.01 + 5.0
    sos = butterworth(2, cutoff, fs, btype)
    ref = sps.sosfiltfilt(sos, x)
    got = filtfilt_blocks(sos, x, int(np.ceil(max(4.0 / cutoff, 2.0) * fs)))
    assert np.max(np.abs(got - ref)) <= 1e-6 * np.std(x)


def test_short_series_are_filtered_too():
    sos = butterworth(2, 1.0, 8.0, "lowpass")
    x = np.linspace(0, 1, 5)  # shorter than scipy's default padding
    assert np.allclose(filtfilt_blocks(sos, x, 16), sps.sosfiltfilt(sos, x, padlen=4))


@pytest.mark.parametrize("step", [1, 2, 3, 4, 8])
@pytest.mark.parametrize("n", [10, 11, 1001, 1003])
def test_cic_decimator_is_a_centred_triangle(step, n):
    # Hogenauer (1981): a second-order CIC decimator is a k-boxcar applied twice, i.e.
    # a triangle of 2k-1 taps; reference by numpy.convolve with edge extension
    x = np.random.default_rng(n).normal(size=n)
    w = (step - np.abs(np.arange(-(step - 1), step))) / step**2
    ref = np.convolve(np.pad(x, step - 1, mode="edge"), w, mode="valid")[::step]
    assert np.allclose(decimate_cic(x, step), ref)


def test_cic_response_is_zero_at_the_folding_frequencies():
    # the frequencies that fold onto 0 Hz at the kept rate (multiples of fs/k) vanish
    fs, k = 32.0, 4
    t = np.arange(int(fs * 60)) / fs
    for f in (8.0, 16.0):
        y = decimate_cic(np.cos(2 * np.pi * f * t), k)
        assert np.abs(y[2:-2]).max() < 1e-9


def test_lowpass_is_zero_phase():
    fs = 8.0
    t = np.arange(int(fs * 120)) / fs
    pulse = np.exp(-0.5 * ((t - 60.0) / 1.0) ** 2)
    y = lowpass_butterworth(pulse, fs, EdaSettings())
    assert t[np.argmax(y)] == pytest.approx(60.0)
    # symmetric input, symmetric output about the peak
    i = int(np.argmax(y))
    assert np.allclose(y[i - 40:i], y[i + 1:i + 41][::-1], atol=1e-6)


def test_cut_off_is_kept_below_nyquist():
    assert effective_lowpass_hz(8.0, EdaSettings()) == 3.0
    assert effective_lowpass_hz(4.0, EdaSettings()) == pytest.approx(1.6)
