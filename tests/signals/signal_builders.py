"""Constructed recordings for the signals tests: Bateman-shaped SCRs of known onset
and amplitude on a tonic level, and artifacts of known place."""

from __future__ import annotations

import numpy as np

from pipeline.config import SignalSettings
from pipeline.types import Recording


def bateman(t: np.ndarray, tau_rise_s: float, tau_decay_s: float) -> np.ndarray:
    """exp(-t/tau2) - exp(-t/tau1) for t >= 0 (0 before), scaled to peak 1.

    Benedek & Kaernbach (2010), J Neurosci Methods 190:80-91: the impulse response
    of the continuous decomposition.
    """
    tt = np.maximum(t, 0.0)
    b = np.exp(-tt / tau_decay_s) - np.exp(-tt / tau_rise_s)
    return b / bateman_peak_value(tau_rise_s, tau_decay_s)


def bateman_peak_time(tau_rise_s: float, tau_decay_s: float) -> float:
    """Onset-to-peak time of the Bateman function (where its derivative is zero)."""
    return float(np.log(tau_decay_s / tau_rise_s) * tau_rise_s * tau_decay_s
                 / (tau_decay_s - tau_rise_s))


def bateman_peak_value(tau_rise_s: float, tau_decay_s: float) -> float:
    tp = bateman_peak_time(tau_rise_s, tau_decay_s)
    return float(np.exp(-tp / tau_decay_s) - np.exp(-tp / tau_rise_s))


def scr_train(seconds: float, fs: float, onsets: np.ndarray, amplitudes: np.ndarray, *,
              tau_rise_s: float = 0.75, tau_decay_s: float = 3.75, level_us: float = 5.0,
              drift_us_per_s: float = 0.0, noise_sd_us: float = 0.0,
              seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Times and skin conductance: Bateman SCRs on a linearly drifting tonic level."""
    t = np.arange(int(round(seconds * fs))) / fs
    x = level_us + drift_us_per_s * t
    for onset, amp in zip(onsets, amplitudes):
        x = x + amp * bateman(t - onset, tau_rise_s, tau_decay_s)
    if noise_sd_us:
        x = x + np.random.default_rng(seed).normal(0.0, noise_sd_us, t.size)
    return t, x


def recording(t: np.ndarray, eda: np.ndarray, **channels: np.ndarray) -> Recording:
    return Recording(time_s=np.asarray(t, dtype=float),
                     channels={"eda_us": np.asarray(eda, dtype=float), **channels})


def settings(**sections) -> SignalSettings:
    """SignalSettings with some sections overridden, e.g. settings(eda={"pad_s": 0})."""
    return SignalSettings.model_validate(sections)


def match_events(found: np.ndarray, truth: np.ndarray, tolerance_s: float
                 ) -> tuple[int, np.ndarray, np.ndarray]:
    """One-to-one matching of event times within a tolerance (greedy, nearest first).

    Returns the number of matches, and for each truth event the matched found time
    (NaN where unmatched) and the index of the match.
    """
    found = np.asarray(found, dtype=float)
    truth = np.asarray(truth, dtype=float)
    pairs = [(abs(f - t), i, j) for i, t in enumerate(truth) for j, f in enumerate(found)
             if abs(f - t) <= tolerance_s]
    pairs.sort()
    used_t, used_f = set(), set()
    matched = np.full(truth.size, np.nan)
    index = np.full(truth.size, -1)
    for _, i, j in pairs:
        if i in used_t or j in used_f:
            continue
        used_t.add(i)
        used_f.add(j)
        matched[i] = found[j]
        index[i] = j
    return len(used_t), matched, index


def f1_score(n_match: int, n_found: int, n_truth: int) -> float:
    if n_found == 0 or n_truth == 0:
        return 0.0
    precision, recall = n_match / n_found, n_match / n_truth
    return 0.0 if n_match == 0 else 2 * precision * recall / (precision + recall)
