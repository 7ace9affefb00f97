"""Generated recordings: handbook-typical levels and responses, clock mapping, artifacts."""

from __future__ import annotations

import time
import warnings

import numpy as np
import pandas as pd
import pytest

from synthetic_diaries.options import SynthOptions
from synthetic_diaries.signals import bateman_kernel, bateman_peak_s, simulate_recording


def _rest_recording(seconds: int = 1200, fs: float = 32.0, seed: int = 5):
    opts = SynthOptions(sampling_rate_hz=fs, artifacts=SynthOptions().artifacts.without())
    state = np.zeros(seconds, dtype=np.int8)  # nothing in view: at rest
    return opts, simulate_recording(np.random.default_rng(seed), state, np.array([]),
                                    scl_baseline_us=7.0, hr_baseline_bpm=70.0,
                                    cohort=opts.cohorts[0], offset_s=20.0, rate=1.00004,
                                    opts=opts)


def test_levels_and_scr_amplitudes_are_handbook_typical(small_study):
    # Dawson, Schell & Filion, "The electrodermal system", Handbook of Psychophysiology:
    # skin conductance level typically 2-20 uS, SCR amplitude typically 0.1-1.0 uS.
    scrs = pd.read_csv(small_study / "truth" / "scrs.csv")
    assert len(scrs) > 100
    assert scrs["amplitude_us"].between(0.1, 1.0).all()
    people = pd.read_csv(small_study / "truth" / "participants.csv")
    assert people["scl_baseline_us"].between(2.0, 20.0).all()
    sec = pd.read_parquet(small_study / "truth" / "seconds.parquet")
    clean = sec["eda_clean_us"].dropna()
    assert clean.between(2.0, 20.0).mean() > 0.99


def test_nonspecific_scr_rate_at_rest_is_handbook_typical(small_study):
    # Dawson, Schell & Filion: 1-3 non-specific SCRs per minute at rest.
    scrs = pd.read_csv(small_study / "truth" / "scrs.csv")
    sec = pd.read_parquet(small_study / "truth" / "seconds.parquet")
    rest = scrs[(scrs["cause"] == "spontaneous") & (scrs["state"] == "none")]
    minutes = (sec["state"] == "none").sum() / 60
    assert 1.0 <= len(rest) / minutes <= 3.0


def test_bateman_shape_rise_and_recovery():
    # Benedek & Kaernbach (2010): c * (exp(-t/tau2) - exp(-t/tau1)), tau1 ~ 0.75-1 s,
    # tau2 = 3.75 s. Dawson, Schell & Filion: rise time 1-3 s, half recovery 2-10 s
    # (both from memory, CHECK_VALUES "memory").
    fs = 1000.0
    k = bateman_kernel(fs, 0.75, 3.75)
    t = np.arange(len(k)) / fs
    assert k.max() == pytest.approx(1.0)
    peak = t[np.argmax(k)]
    assert peak == pytest.approx(bateman_peak_s(0.75, 3.75), abs=1e-3)
    expected = 0.75 * 3.75 / (3.75 - 0.75) * np.log(3.75 / 0.75)  # d/dt = 0
    assert peak == pytest.approx(expected, abs=1e-3)
    assert 1.0 <= peak <= 3.0
    half = t[np.argmax((t > peak) & (k <= 0.5))] - peak
    assert 2.0 <= half <= 10.0


@pytest.mark.slow
def test_neurokit2_finds_the_generated_scrs():
    # Reference library (test-only): neurokit2's EDA pipeline should find about as
    # many SCRs as were generated, with typical amplitudes (0.1-1.0 uS, Dawson et al.).
    import neurokit2 as nk

    opts, rec = _rest_recording()
    eda = rec.samples["eda_us"].to_numpy(dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, info = nk.eda_process(eda, sampling_rate=32)
    amp = np.asarray(info["SCR_Amplitude"], dtype=float)
    amp = amp[np.isfinite(amp) & (amp >= 0.05)]  # 0.05 uS: Boucsein et al. (2012)
    generated = len(rec.scrs)
    assert len(amp) == pytest.approx(generated, rel=0.35)
    assert 0.1 <= np.median(amp) <= 1.0
    minutes = len(eda) / 32 / 60
    assert 1.0 <= len(amp) / minutes <= 3.0  # at rest, Dawson et al.


def test_clean_recording_has_no_gaps_and_plausible_channels():
    opts, rec = _rest_recording(seconds=600)
    s = rec.samples
    assert s["eda_us"].notna().all() and rec.valid.all()
    assert np.all(np.diff(s["time_s"]) == pytest.approx(1 / 32))
    hr = s["hr_bpm"].dropna()
    assert len(hr) == pytest.approx(s["time_s"].iloc[-1], abs=2)  # one per second
    assert hr.between(30, 200).all()  # plausible heart rates (common practice)
    g = np.sqrt(s["acc_x"] ** 2 + s["acc_y"] ** 2 + s["acc_z"] ** 2)
    assert g.median() == pytest.approx(1.0, abs=0.03)
    step = opts.sensor.eda_resolution_us
    assert np.allclose(np.rint(s["eda_us"] / step) * step, s["eda_us"])


def _binned(frame: pd.DataFrame, offset: float, rate: float, duration: int) -> np.ndarray:
    sec = np.floor((frame["time_s"].to_numpy() - offset) / rate).astype(int)
    keep = (sec >= 0) & (sec < duration)
    return pd.Series(frame["eda_us"].to_numpy(dtype=float)[keep]).groupby(sec[keep]).mean() \
        .reindex(range(duration)).to_numpy()


def test_recording_is_the_clean_signal_through_the_sensor_clock(small_study):
    truth = pd.read_csv(small_study / "truth" / "sessions.csv")
    sec = pd.read_parquet(small_study / "truth" / "seconds.parquet")
    for row in truth.itertuples():
        frame = pd.read_parquet(small_study / "signals" /
                                f"{row.participant_id}__{row.session_id}.parquet")
        mine = sec[(sec["participant_id"] == row.participant_id)
                   & (sec["session_id"] == row.session_id)]
        valid = mine["signal_valid"].to_numpy()
        clean = mine["eda_clean_us"].to_numpy()
        got = _binned(frame, row.offset_s, row.clock_rate, row.duration_s)
        assert np.nanmax(np.abs(got - clean)[valid]) < 0.01
        # one second off, and the match is gone: the test can fail
        shifted = _binned(frame, row.offset_s + 1.0, row.clock_rate, row.duration_s)
        assert np.nanmax(np.abs(shifted - clean)[valid]) > 0.02


def test_artifacts_are_in_the_recording_where_truth_says(small_study, small_opts):
    art = pd.read_csv(small_study / "truth" / "artifacts.csv")
    assert set(art["kind"]) == {"dropout", "spike", "motion", "flatline", "clipping"}
    fs = small_opts.sampling_rate_hz
    for (p, s), a in art.groupby(["participant_id", "session_id"]):
        eda = pd.read_parquet(small_study / "signals" / f"{p}__{s}.parquet")["eda_us"].to_numpy()
        n = len(eda)
        masks = {}
        for kind in ("dropout", "flatline", "clipping", "spike", "motion"):
            m = np.zeros(n, dtype=bool)
            for r in a[a["kind"] == kind].itertuples():
                m[int(round(r.start_sensor_s * fs)):int(round(r.end_sensor_s * fs))] = True
            masks[kind] = m
        assert np.isnan(eda[masks["dropout"]]).all()
        flat = masks["flatline"] & ~masks["dropout"]
        assert (eda[flat] == small_opts.artifacts.flatline_level_us).all()
        clip = masks["clipping"] & ~masks["dropout"] & ~masks["flatline"]
        assert (eda[clip] == np.float32(small_opts.artifacts.clip_level_us)).all()
        untouched = ~np.logical_or.reduce(list(masks.values()))
        assert np.isfinite(eda[untouched]).all()
        assert ((eda[untouched] > 0.5) & (eda[untouched] < 30)).all()


def test_a_four_hour_32_hz_session_generates_in_seconds():
    # The generator is vectorised over samples: 460 800 samples of six channels. The
    # bound is loose (measured about 0.3 s on one core) so a busy machine does not fail it.
    from synthetic_diaries.codes import _simulate, count_switches

    opts = SynthOptions(sampling_rate_hz=32.0)
    cohort = opts.cohorts[0]
    began = time.perf_counter()
    rng = np.random.default_rng(0)
    codes = _simulate(rng, cohort, 4 * 3600, 1.0, sorted(opts.platform_groups))
    empty = np.array([], dtype=np.int64)
    _, switch_s = count_switches(codes.bout_start, codes.bout_end, codes.bout_platform,
                                 empty, empty)
    rec = simulate_recording(rng, codes.state, switch_s, scl_baseline_us=7.0,
                             hr_baseline_bpm=70.0, cohort=cohort, offset_s=90.0,
                             rate=1.00004, opts=opts)
    took = time.perf_counter() - began
    assert len(rec.samples) > 4 * 3600 * 32
    assert took < 5.0


def test_unknown_scr_shape_names_the_choices():
    from pipeline.errors import ConfigError
    from synthetic_diaries.signals import scr_kernel

    with pytest.raises(ConfigError) as exc:
        scr_kernel("sigmoid", 32.0, 0.75, 3.75)
    assert "bateman" in exc.value.hint
