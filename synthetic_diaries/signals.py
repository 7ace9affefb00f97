"""One session's sensor recording, generated from the session's true states.

The clean skin conductance is defined on the video clock: a participant's tonic
baseline, a per-state level and spread that follow state changes smoothly, a slow
drift, and skin conductance responses (SCRs) of Bateman shape. The sensor samples
that signal at its own rate on its own clock (sensor_s = offset + rate * video_s),
adds noise and artifacts and quantises. Everything is vectorised over samples.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from scipy import signal as sps

from pipeline.errors import choose
from synthetic_diaries.codes import MULTI, NONE, STATE_NAMES
from synthetic_diaries.options import CohortBehaviour, SynthOptions


# ------------------------------------------------------------------ SCR shapes
def bateman_kernel(fs: float, tau_rise_s: float, tau_decay_s: float) -> np.ndarray:
    """Bateman impulse response c * (exp(-t/tau2) - exp(-t/tau1)), peak scaled to 1.

    ``tau_rise_s`` is tau1 (onset), ``tau_decay_s`` tau2 (recovery); sampled at ``fs``
    from t = 0 for ten decay time constants.

    References
    ----------
    Benedek, M., & Kaernbach, C. (2010). A continuous measure of phasic electrodermal
    activity. Journal of Neuroscience Methods 190(1), 80-91.
    """
    t = np.arange(int(np.ceil(10 * tau_decay_s * fs))) / fs
    k = np.exp(-t / tau_decay_s) - np.exp(-t / tau_rise_s)
    return k / k.max()


SCR_SHAPES: dict[str, Callable[[float, float, float], np.ndarray]] = {
    "bateman": bateman_kernel,
}


def scr_kernel(shape: str, fs: float, tau_rise_s: float, tau_decay_s: float) -> np.ndarray:
    """The SCR impulse response named ``shape`` (a key of :data:`SCR_SHAPES`)."""
    fn = choose(SCR_SHAPES, shape, "SCR shape")
    return fn(fs, tau_rise_s, tau_decay_s)


def bateman_peak_s(tau_rise_s: float, tau_decay_s: float) -> float:
    """Time from onset to the peak of the Bateman function (its rise time)."""
    return float(np.log(tau_decay_s / tau_rise_s) * tau_rise_s * tau_decay_s
                 / (tau_decay_s - tau_rise_s))


# ------------------------------------------------------------ slow processes
def smooth_noise(rng: np.random.Generator, n: int, tau: float) -> np.ndarray:
    """Stationary smooth random series, unit variance, time constant ``tau`` steps.

    White noise through two first-order low-pass stages (a critically damped
    second-order filter): unlike a first-order process it has no step-to-step jumps,
    so slow tonic changes never look like skin conductance responses. A burn-in of
    ten time constants makes the start stationary.
    """
    a = float(np.exp(-1.0 / tau))
    burn = int(np.ceil(10 * tau))
    e = rng.standard_normal(n + burn)
    once = sps.lfilter([1 - a], [1.0, -a], e)
    twice = sps.lfilter([1 - a], [1.0, -a], once)[burn:]
    # variance of white noise through the two stages: sum of the squared impulse response
    k = np.arange(burn * 4 + 1)
    h = (1 - a) ** 2 * (k + 1) * a**k
    return twice / np.sqrt(np.sum(h**2))


def follow(x: np.ndarray, tau: float) -> np.ndarray:
    """First-order low-pass that starts at x[0]: how a level follows a step."""
    a = float(np.exp(-1.0 / tau))
    y, _ = sps.lfilter([1 - a], [1.0, -a], x, zi=[a * x[0]])
    return y


# --------------------------------------------------------------------- result
@dataclass
class SessionRecording:
    """What one session's recording is, and what it really was.

    ``samples``: the recording as written (time_s on the sensor clock, eda_us, hr_bpm,
    acc_x/y/z). ``clean_1hz_us``: per video second 0..D-1, the mean of the clean skin
    conductance over the sensor samples that fall in that second (NaN where none).
    ``valid``: per video second, True where no artifact touches it and the sensor
    recorded. ``scrs`` and ``artifacts``: one row per SCR / artifact, both clocks.
    """

    samples: pd.DataFrame
    clean_1hz_us: np.ndarray
    valid: np.ndarray
    scrs: pd.DataFrame
    artifacts: pd.DataFrame


ARTIFACT_ORDER = ("motion", "spike", "clipping", "flatline", "dropout")


def simulate_recording(rng: np.random.Generator, state: np.ndarray, switch_s: np.ndarray,
                       *, scl_baseline_us: float, hr_baseline_bpm: float,
                       cohort: CohortBehaviour, offset_s: float, rate: float,
                       opts: SynthOptions) -> SessionRecording:
    """Generate one session's recording from its per-second states.

    Parameters
    ----------
    rng : numpy.random.Generator
    state : ndarray of int
        True state (0 none, 1 single, 2 multi) of each video second, coded or not.
    switch_s : ndarray
        Video seconds of the session's switches (for switch-elicited SCRs).
    scl_baseline_us, hr_baseline_bpm : float
        The participant's baseline skin conductance level and resting heart rate.
    cohort : CohortBehaviour
        Gives the compression factor of the multi state's spread.
    offset_s, rate : float
        The sensor clock: sensor_s = offset_s + rate * video_s.
    opts : SynthOptions
    """
    ar, sc, art, sen, hr = opts.arousal, opts.scr, opts.artifacts, opts.sensor, opts.heart
    fs = float(opts.sampling_rate_hz)
    duration = len(state)
    total_s = offset_s + rate * duration + opts.clock.tail_s
    n = int(np.floor(total_s * fs)) + 1
    t = np.arange(n, dtype=np.float64) / fs
    v = (t - offset_s) / rate

    # --- tonic, at whole video seconds, then interpolated to the samples
    s0, s1 = int(np.floor(v[0])) - 2, int(np.ceil(v[-1])) + 2
    secs = np.arange(s0, s1 + 1)
    inside = (secs >= 0) & (secs < duration)
    ext = np.full(len(secs), NONE, dtype=np.int64)
    ext[inside] = state[secs[inside]]
    levels = np.array([ar.none_level_us, ar.single_level_us, ar.multi_level_us])
    spreads = np.array([ar.none_spread_us, ar.single_spread_us,
                        ar.single_spread_us * cohort.compression_factor])
    level = follow(levels[ext], ar.transition_time_constant_s)
    spread = follow(spreads[ext], ar.transition_time_constant_s)
    session_shift = rng.normal(0.0, ar.session_offset_sd_us)
    fluct = smooth_noise(rng, len(secs), ar.fluctuation_time_constant_s)
    drift = ar.drift_sd_us * smooth_noise(rng, len(secs), ar.drift_time_constant_min * 60.0)
    tonic = np.maximum(scl_baseline_us + session_shift + level + spread * fluct + drift,
                       ar.floor_us)
    clean = np.interp(v, secs, tonic)

    # --- SCRs: non-specific (Poisson per second by state) and switch-elicited
    rates = np.array([sc.none_rate_per_min, sc.single_rate_per_min, sc.multi_rate_per_min]) / 60
    counts = rng.poisson(rates[ext])
    onset_v = np.repeat(secs, counts) + rng.random(counts.sum())
    cause = np.repeat(np.array(["spontaneous"], dtype=object), len(onset_v))
    if len(switch_s) and sc.switch_response_probability > 0:
        elicits = rng.random(len(switch_s)) < sc.switch_response_probability
        lat = rng.uniform(sc.switch_latency_min_s, sc.switch_latency_max_s, elicits.sum())
        onset_v = np.concatenate([onset_v, np.asarray(switch_s, dtype=float)[elicits] + lat])
        cause = np.concatenate([cause, np.repeat(np.array(["switch"], dtype=object),
                                                 elicits.sum())])
    amp = np.exp(rng.uniform(np.log(sc.amplitude_min_us), np.log(sc.amplitude_max_us),
                             len(onset_v)))
    idx = np.rint((offset_s + rate * onset_v) * fs).astype(np.int64)
    ok = (idx >= 0) & (idx < n)
    idx, amp, cause = idx[ok], amp[ok], cause[ok]
    order = np.argsort(idx, kind="stable")
    idx, amp, cause = idx[order], amp[order], cause[order]
    impulses = np.zeros(n)
    np.add.at(impulses, idx, amp)
    kernel = scr_kernel(sc.shape, fs, sc.tau_rise_s, sc.tau_decay_s)
    clean = clean + sps.oaconvolve(impulses, kernel)[:n]

    # --- truth on the video clock
    sec_of = np.floor(v).astype(np.int64)
    in_session = (sec_of >= 0) & (sec_of < duration)
    per = np.bincount(sec_of[in_session], minlength=duration)[:duration]
    total = np.bincount(sec_of[in_session], weights=clean[in_session], minlength=duration)
    with np.errstate(invalid="ignore", divide="ignore"):
        clean_1hz = np.where(per > 0, total[:duration] / np.maximum(per, 1), np.nan)
    scr_video = (idx / fs - offset_s) / rate
    scr_sec = np.clip(np.floor(scr_video).astype(np.int64), 0, max(duration - 1, 0))
    scr_state = np.where((scr_video >= 0) & (scr_video < duration),
                         np.array(STATE_NAMES, dtype=object)[state[scr_sec]], "outside")
    scrs = pd.DataFrame({
        "onset_sensor_s": idx / fs,
        "onset_video_s": scr_video,
        "amplitude_us": amp,
        "cause": cause,
        "state": scr_state,
    })

    # --- the sensor: noise, heart rate, accelerometer
    eda = clean + rng.normal(0.0, sen.eda_noise_sd_us, n)
    channels: dict[str, np.ndarray] = {}
    if hr.enabled:
        hr_sec = (hr_baseline_bpm + follow(np.where(ext == MULTI, hr.multi_shift_bpm, 0.0),
                                           opts.arousal.transition_time_constant_s)
                  + hr.fluctuation_sd_bpm
                  * smooth_noise(rng, len(secs), hr.fluctuation_time_constant_s))
        hr_times = np.arange(0.0, t[-1] + 1e-9, 1.0 / hr.rate_hz)
        hr_idx = np.unique(np.minimum(np.searchsorted(t, hr_times - 1e-9), n - 1))
        hr_bpm = np.full(n, np.nan)
        hr_bpm[hr_idx] = np.round(np.interp(v[hr_idx], secs, hr_sec), 1)
        channels["hr_bpm"] = hr_bpm
    tilt_x = sen.tilt_sd_rad * smooth_noise(rng, len(secs), sen.tilt_time_constant_s)
    tilt_y = sen.tilt_sd_rad * smooth_noise(rng, len(secs), sen.tilt_time_constant_s)
    ax = np.sin(np.interp(v, secs, tilt_x))
    ay = np.sin(np.interp(v, secs, tilt_y))
    az = np.sqrt(np.clip(1.0 - ax**2 - ay**2, 0.0, None))
    acc = np.stack([ax, ay, az]) + rng.normal(0.0, sen.acc_noise_sd_g, (3, n))

    # --- artifacts, on the sensor clock
    medians = {"dropout": art.dropout_median_s, "motion": art.motion_median_s,
               "flatline": art.flatline_median_s, "clipping": art.clipping_median_s}
    rows = []
    for kind in ARTIFACT_ORDER:
        rate_h = art.rates()[kind]
        count = rng.poisson(rate_h * total_s / 3600.0)
        if count == 0:
            continue
        start = rng.integers(0, n, count)
        if kind == "spike":
            length = rng.integers(1, 4, count)
        else:
            sec_len = medians[kind] * np.exp(rng.normal(0.0, art.length_sd_log, count))
            length = np.maximum(1, np.rint(sec_len * fs)).astype(np.int64)
        for k0, L in zip(start, length):
            k1 = min(n, int(k0 + L))
            k0 = int(k0)
            if kind == "motion":
                acc[:, k0:k1] += rng.normal(0.0, art.motion_acc_sd_g, (3, k1 - k0))
                w = max(1, int(fs / 4))
                bump = np.convolve(rng.normal(0.0, art.motion_eda_sd_us, k1 - k0),
                                   np.ones(w) / np.sqrt(w), mode="same")
                eda[k0:k1] += bump
            elif kind == "spike":
                eda[k0:k1] += rng.uniform(art.spike_min_us, art.spike_max_us)
            elif kind == "clipping":
                eda[k0:k1] = art.clip_level_us
            elif kind == "flatline":
                eda[k0:k1] = art.flatline_level_us
            else:  # dropout
                eda[k0:k1] = np.nan
                acc[:, k0:k1] = np.nan
                if "hr_bpm" in channels:
                    channels["hr_bpm"][k0:k1] = np.nan
            rows.append((kind, k0 / fs, k1 / fs))
    artifacts = pd.DataFrame(rows, columns=["kind", "start_sensor_s", "end_sensor_s"])
    artifacts["start_video_s"] = (artifacts["start_sensor_s"] - offset_s) / rate
    artifacts["end_video_s"] = (artifacts["end_sensor_s"] - offset_s) / rate
    artifacts = artifacts.sort_values(["start_sensor_s", "kind"], kind="stable",
                                      ignore_index=True)

    # --- validity per video second: recorded, and touched by no artifact
    valid = per > 0
    if len(artifacts):
        lo = np.clip(np.floor(artifacts["start_video_s"].to_numpy()), 0, duration).astype(np.int64)
        hi = np.clip(np.ceil(artifacts["end_video_s"].to_numpy()), 0, duration).astype(np.int64)
        edges = np.zeros(duration + 1, dtype=np.int64)
        np.add.at(edges, lo, 1)
        np.add.at(edges, hi, -1)
        valid &= np.cumsum(edges[:-1]) == 0

    # --- quantise as the sensor does and assemble
    def quantise(x: np.ndarray, step: float) -> np.ndarray:
        return (np.rint(x / step) * step).astype(np.float32)

    samples = pd.DataFrame({"time_s": t, "eda_us": quantise(eda, sen.eda_resolution_us)})
    if "hr_bpm" in channels:
        samples["hr_bpm"] = channels["hr_bpm"].astype(np.float32)
    for i, axis in enumerate("xyz"):
        samples[f"acc_{axis}"] = quantise(acc[i], sen.acc_resolution_g)
    return SessionRecording(samples=samples, clean_1hz_us=clean_1hz, valid=valid,
                            scrs=scrs, artifacts=artifacts)
