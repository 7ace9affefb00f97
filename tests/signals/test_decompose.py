"""Tonic/phasic decomposition: the high-pass against scipy, the convex method against
the closed-form Bateman response and an independent solver of the same programme."""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
from scipy import signal as sps
from scipy.optimize import minimize
from signal_builders import bateman, scr_train

from pipeline.config import ConvexSettings, DecompositionSettings
from pipeline.errors import ConfigError
from pipeline.signals.convex import (
    bateman_arma,
    decompose_convex,
    solve_window,
    tonic_regressors,
)
from pipeline.signals.decompose import decompose


def test_highpass_phasic_is_scipys_zero_phase_butterworth():
    # Braithwaite et al. (2013): phasic = 0.05 Hz high-pass; scipy.signal is the reference
    rng = np.random.default_rng(0)
    c = 6.0 + np.cumsum(rng.normal(0, 0.01, 8 * 900))
    dec = decompose(c, 8.0, DecompositionSettings())
    ref = sps.sosfiltfilt(sps.butter(2, 0.05, "highpass", fs=8.0, output="sos"), c)
    assert np.allclose(dec.phasic, ref, atol=1e-9)
    assert np.allclose(dec.tonic + dec.phasic, c)


def test_unknown_method_error_lists_the_registry():
    with pytest.raises(ConfigError) as info:
        decompose(np.ones(100), 8.0, DecompositionSettings(method="ledalab"))
    assert "convex" in info.value.hint and "highpass" in info.value.hint


def test_arma_response_is_the_bateman_function():
    # Greco et al. (2016) discretise exp(-t/tau0) - exp(-t/tau1) by the bilinear
    # transform: the impulse response sums to tau0 - tau1 (its integral), and samples
    # the closed-form function times the step.
    fs, tau1, tau0 = 16.0, 0.7, 2.0
    ma, ar = bateman_arma(fs, tau1, tau0)
    impulse = np.zeros(int(60 * fs))
    impulse[0] = 1.0
    h = sps.lfilter(ma, ar, impulse)
    assert h.sum() == pytest.approx(tau0 - tau1, rel=1e-6)
    t = np.arange(impulse.size) / fs
    closed = (np.exp(-t / tau0) - np.exp(-t / tau1)) / fs
    # (the first sample carries the trapezoid rule's half weight at t = 0)
    assert np.max(np.abs(h[1:] - closed[1:])) <= 0.01 * closed.max()


def _dense_problem(y: np.ndarray, fs: float, cfg: ConvexSettings):
    """The cvxEDA programme written out with dense matrices, independently."""
    n = y.size
    ma, ar = bateman_arma(fs, cfg.tau_rise_s, cfg.tau_decay_s)
    M = np.zeros((n, n))
    A = np.zeros((n, n))
    for i in range(2, n):
        M[i, i], M[i, i - 1], M[i, i - 2] = ma
        A[i, i], A[i, i - 1], A[i, i - 2] = ar
    other, n_spl = tonic_regressors(n, fs, cfg.knot_s)
    K = np.hstack([M, other])
    ridge = np.r_[np.zeros(n), np.full(n_spl, cfg.gamma), np.zeros(other.shape[1] - n_spl)]
    G = np.hstack([A[2:], np.zeros((n - 2, other.shape[1]))])

    def f(z):
        r = K @ z - y
        return 0.5 * r @ r + cfg.alpha * (G @ z).sum() + 0.5 * (ridge * z * z).sum()

    def grad(z):
        return K.T @ (K @ z - y) + cfg.alpha * G.sum(axis=0) + ridge * z

    return f, grad, G, K


def test_interior_point_solution_matches_an_independent_solver():
    # The same quadratic programme written out with dense matrices and solved by
    # scipy's SLSQP: our optimum is at least as good and the phasic parts agree.
    fs = 4.0
    cfg = ConvexSettings()
    t = np.arange(int(30 * fs)) / fs
    x = 5.0 + 0.02 * t + 0.4 * bateman(t - 6.0, 0.7, 2.0) + 0.2 * bateman(t - 18.0, 0.7, 2.0)
    x += np.random.default_rng(2).normal(0, 0.003, t.size)
    y = (x - x.mean()) / x.std()
    fit = solve_window(y, fs, cfg)
    assert fit.converged
    f, grad, G, K = _dense_problem(y, fs, cfg)
    z0 = np.linalg.lstsq(K, y, rcond=None)[0]
    ref = minimize(f, z0, jac=grad, method="SLSQP",
                   constraints=[{"type": "ineq", "fun": lambda z: G @ z, "jac": lambda z: G}],
                   options={"maxiter": 2000, "ftol": 1e-12})
    # (SLSQP may stop on "positive directional derivative" at the optimum's precision)
    assert ref.success or ref.status == 8
    assert fit.objective <= ref.fun + 1e-6 * abs(ref.fun)
    assert fit.objective == pytest.approx(ref.fun, rel=1e-4)
    ref_phasic = K[:, : y.size] @ ref.x[: y.size]
    assert np.max(np.abs(fit.phasic - ref_phasic)) <= 0.02 * np.ptp(ref_phasic)
    assert (fit.driver >= -1e-9).all()


def test_convex_decomposition_recovers_tonic_and_responses():
    # responses of the model's own impulse response (tau1 0.7 s, tau0 2 s, Greco et
    # al. 2016) on a slowly varying tonic level
    fs = 8.0
    onsets = np.arange(15.0, 290.0, 23.0)
    amps = np.linspace(0.1, 0.8, onsets.size)
    t, x = scr_train(300.0, fs, onsets, amps, tau_rise_s=0.7, tau_decay_s=2.0,
                     level_us=6.0, noise_sd_us=0.002, seed=4)
    tonic_true = 6.0 + 0.3 * np.sin(2 * np.pi * t / 200.0)
    x = x + tonic_true - 6.0
    tonic, phasic, ok = decompose_convex(x, fs, ConvexSettings())
    assert ok
    assert np.max(np.abs(tonic - tonic_true)) < 0.05
    for o, a in zip(onsets, amps):
        seg = (t >= o - 1) & (t < o + 5)
        assert phasic[seg].max() - phasic[seg].min() == pytest.approx(a, rel=0.1)


def test_windows_agree_with_one_solve_and_memory_stays_bounded():
    fs = 8.0
    rng = np.random.default_rng(7)
    onsets = np.sort(rng.uniform(5, 1195, 50))
    t, x = scr_train(1200.0, fs, onsets, rng.uniform(0.05, 0.5, 50), tau_rise_s=0.7,
                     tau_decay_s=2.0, level_us=5.0, noise_sd_us=0.002, seed=1)
    one = ConvexSettings(window_s=1200.0)
    windowed = ConvexSettings(window_s=120.0, overlap_s=60.0)
    _, ph_one, _ = decompose_convex(x[: int(600 * fs)], fs, one)
    _, ph_win, _ = decompose_convex(x[: int(600 * fs)], fs, windowed)
    core = slice(int(60 * fs), int(540 * fs))
    assert np.max(np.abs(ph_win[core] - ph_one[core])) <= 0.02 * np.ptp(ph_one)

    def peak(seconds: float) -> int:
        tracemalloc.start()
        decompose_convex(x[: int(seconds * fs)], fs, windowed)
        peak_bytes = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        return peak_bytes

    # four times the recording costs its outputs, not bigger windows
    grow = peak(1200.0) - peak(300.0)
    assert grow <= 8 * 8 * int(900 * fs)
