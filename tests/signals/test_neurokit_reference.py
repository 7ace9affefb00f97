"""NeuroKit2 as an outside reference, on its own simulated skin conductance.

``neurokit2.eda_simulate`` places ``scr_number`` responses at known starts
(``linspace(0, duration, scr_number, endpoint=False)``, each peaking 0.3-2 s after
its start, amplitude 1 above a 1 uS level); ``neurokit2.eda_process`` scores the
same signal. NeuroKit2 is a test-only dependency (Makowski et al. 2021, NeuroKit2: A
Python toolbox for neurophysiological signal processing, Behav Res Methods 53:1689).
"""

from __future__ import annotations

import warnings

import neurokit2 as neurokit
import numpy as np
import pytest
from signal_builders import f1_score, match_events, recording

from pipeline.config import SignalSettings
from pipeline.signals import process_recording

FS = 32
DURATION = 600


def _simulate(scr_number: int, seed: int) -> np.ndarray:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return neurokit.eda_simulate(duration=DURATION, sampling_rate=FS, scr_number=scr_number,
                                     noise=0.01, drift=0.001, random_state=seed)


def _truth_starts(scr_number: int) -> np.ndarray:
    return np.linspace(0, DURATION, scr_number, endpoint=False)


def _match_to_windows(times: np.ndarray, starts: np.ndarray) -> int:
    """Responses found inside [start - 0.5 s, start + 3 s) of a simulated one, one each."""
    return match_events(times, starts + 1.25, 1.75)[0]


@pytest.mark.parametrize("scr_number,seed", [(10, 1), (20, 2), (40, 3)])
def test_scr_count_and_onsets_agree_with_neurokit(scr_number, seed):
    # (the default decomposition; the convex one assumes Bateman-shaped responses, which
    # eda_simulate's sub-second rises are not: it is checked on Bateman responses in
    # test_scr.py and test_decompose.py)
    eda = _simulate(scr_number, seed)
    t = np.arange(eda.size) / FS
    ours = process_recording(recording(t, eda), SignalSettings()).scrs
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, info = neurokit.eda_process(eda, sampling_rate=FS)
    nk_onsets = np.asarray(info["SCR_Onsets"], dtype=float) / FS
    nk_peaks = np.asarray(info["SCR_Peaks"], dtype=float) / FS
    # the known count
    assert len(ours) == scr_number
    assert len(nk_peaks) == scr_number
    # onsets and peaks one-to-one with NeuroKit2's within 0.5 s (one half of the
    # typical 1-3 s SCR rise time, Dawson et al.)
    n_on, matched_on, _ = match_events(ours["onset_s"].to_numpy(), nk_onsets, 0.5)
    n_pk, matched_pk, _ = match_events(ours["peak_s"].to_numpy(), nk_peaks, 0.5)
    assert n_on == scr_number and n_pk == scr_number
    # amplitudes: the simulated responses are scaled to peak 1 above their level
    assert ours["amplitude_us"].to_numpy() == pytest.approx(1.0, rel=0.1)


@pytest.mark.parametrize("scr_number,seed", [(20, 11), (60, 12)])
def test_detection_f1_at_least_neurokits(scr_number, seed):
    eda = _simulate(scr_number, seed)
    t = np.arange(eda.size) / FS
    starts = _truth_starts(scr_number)
    ours = process_recording(recording(t, eda), SignalSettings()).scrs["peak_s"].to_numpy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, info = neurokit.eda_process(eda, sampling_rate=FS)
    theirs = np.asarray(info["SCR_Peaks"], dtype=float) / FS
    f1_ours = f1_score(_match_to_windows(ours, starts), ours.size, starts.size)
    f1_nk = f1_score(_match_to_windows(theirs, starts), theirs.size, starts.size)
    assert f1_ours >= f1_nk
    assert f1_ours >= 0.95
