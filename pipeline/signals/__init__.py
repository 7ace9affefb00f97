"""Signals stage: one session's recording, cleaned and scored, on the sensor clock.

Entry point: :func:`process_recording`, a pure function of a
:class:`~pipeline.types.Recording` and the ``[signals]`` settings. The steps, each a
published method or a declared rule:

1. the recording is put on a uniform grid (:mod:`.grid`), never interpolating
   across more than ``max_interp_s``;
2. skin conductance is checked by the artifact rules (:mod:`.artifacts`): short
   glitches are bridged, longer invalid stretches padded and masked;
3. a zero-phase Butterworth low-pass cleans it (:mod:`.eda`);
4. it is split into tonic and phasic components (:mod:`.decompose`, ``method=``);
5. SCRs are found and measured (:mod:`.scr`);
6. heart rate, where present, is checked and put on the grid (:mod:`.hr`).

Before the low-pass only every k-th grid sample is kept (after a zero-phase CIC
anti-alias filter), k chosen so that the kept rate is at least ``[signals.eda]
analysis_hz``: skin conductance carries nothing above a few Hz. Steps 3 to 6 and
the output samples use that rate. The align stage then maps the samples onto video
seconds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.config import SignalSettings
from pipeline.signals.artifacts import RawEda, assess, bridged
from pipeline.signals.decompose import decompose, decomposition_method
from pipeline.signals.eda import decimate_cic, effective_lowpass_hz, lowpass_butterworth
from pipeline.signals.grid import Grid, make_grid, to_grid
from pipeline.signals.hr import heart_rate, hr_artifact_method
from pipeline.signals.methods import describe_methods
from pipeline.signals.scr import SCR_COLUMNS, score_scrs, scr_method, scr_table
from pipeline.types import Recording, SessionSignals

__all__ = ["describe_methods", "process_recording"]

ACC = ("acc_x", "acc_y", "acc_z")


def analysis_step(fs: float, analysis_hz: float) -> int:
    """Every k-th grid sample is kept after the low-pass (k >= 1)."""
    return max(1, int(fs // analysis_hz))


def block_mean(a: np.ndarray, step: int) -> np.ndarray:
    """Mean of each block of ``step`` samples (the last block may be shorter), NaN
    samples ignored; one value per kept sample ``a[::step]``."""
    if step == 1:
        return a
    n_blocks = -(-a.size // step)
    sums = np.zeros(n_blocks)
    counts = np.zeros(n_blocks, dtype=np.int64)
    # add up the j-th sample of every block, j = 0 .. step - 1: a few passes over long
    # columns cost far less than a short sum per block
    for j in range(step):
        column = a[j::step]
        have = np.isfinite(column)
        sums[: column.size] += np.where(have, column, 0.0)
        counts[: column.size] += have
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)


def motion_magnitude(rec: Recording, grid: Grid, max_interp_s: float) -> np.ndarray | None:
    """|accelerometer magnitude - 1 g| on the grid, where all three axes are present."""
    if not all(a in rec.channels for a in ACC):
        return None
    # sqrt(x² + y² + z²), squared in place in each axis' own copy, one axis held at a
    # time: on a long recording every fresh array costs more than the arithmetic.
    # (np.hypot would guard against overflow, which accelerations in g never come
    # near, at several times the cost; the two agree to an ulp or so.)
    mag = None
    for axis in ACC:
        v = to_grid(grid, rec.time_s, rec.channels[axis], max_interp_s, copy=True)
        v *= v
        if mag is None:
            mag = v
        else:
            mag += v
        del v
    np.sqrt(mag, out=mag)
    mag -= 1.0
    return np.abs(mag, out=mag)


def process_recording(rec: Recording, cfg: SignalSettings) -> SessionSignals:
    """Clean, decompose and score one recording's skin conductance; add heart rate
    and motion where the recording has them.

    Parameters
    ----------
    rec : Recording
        The recording on its own sensor clock (``eda_us`` required).
    cfg : SignalSettings
        The ``[signals]`` section.

    Returns
    -------
    SessionSignals
        ``samples`` at the kept rate (``sampling_rate_hz``): time_s, eda_us (cleaned),
        eda_tonic_us, eda_phasic_us (all NaN where invalid), eda_valid, and where
        present hr_bpm, hr_valid, motion_g; ``scrs`` one row per SCR (sensor clock);
        ``invalid_share`` per rule; ``methods`` the registry keys that ran.
    """
    # fail on a misspelt method before any work
    decomposition_method(cfg.decomposition.method)
    scr_method(cfg.scr.method)
    hr_artifact_method(cfg.hr.artifact_method)
    notes: list[str] = []
    grid = make_grid(rec.time_s, cfg.resample_hz)
    times = grid.times(rec.time_s)
    fs = grid.fs
    if not grid.same_as_input:
        notes.append(f"resampled to a uniform {fs:g} Hz grid (max_interp_s "
                     f"{cfg.max_interp_s:g})")
    step = analysis_step(fs, cfg.eda.analysis_hz)
    fa = fs / step
    times_a = np.ascontiguousarray(times[::step]) if step > 1 else times
    if step > 1:
        notes.append(f"processed samples kept at {fa:g} Hz (one grid sample in {step}, "
                     "after an anti-alias filter)")
    motion_g = motion_magnitude(rec, grid, cfg.max_interp_s)
    eda = rec.channels["eda_us"]
    x = to_grid(grid, rec.time_s, eda, cfg.max_interp_s)
    # a complete channel comes back as the recording's own array, which is never
    # written to; any other x is a copy of our own, whose gaps can be bridged in place
    columns, scrs, shares, methods = _skin_conductance(x, x is not eda, fs, step, times_a,
                                                       motion_g, cfg, notes)
    del x

    hr = heart_rate(rec.time_s, rec.channels, times_a, fa, cfg.hr, cfg.max_interp_s)
    if hr is not None:
        columns["hr_bpm"] = hr.hr_bpm
        columns["hr_valid"] = hr.valid
        shares.update(hr.shares)
        methods["hr_artifacts"] = cfg.hr.artifact_method
        methods["hr_source"] = hr.source
    if motion_g is not None:
        columns["motion_g"] = block_mean(motion_g, step)
    samples = pd.DataFrame(columns, copy=False)
    return SessionSignals(samples=samples, scrs=scrs, invalid_share=shares,
                          methods=methods, sampling_rate_hz=fa, notes=notes)


def _skin_conductance(x: np.ndarray, x_is_ours: bool, fs: float, step: int,
                      times_a: np.ndarray, motion_g: np.ndarray | None, cfg: SignalSettings,
                      notes: list[str]) -> tuple[dict, pd.DataFrame, dict, dict]:
    """Steps 2-5 on the grid's skin conductance ``x`` (its gaps are bridged in place
    when ``x_is_ours``, else in a copy); the columns are at the kept rate."""
    n_a = times_a.size
    fa = fs / step
    empty_scrs = pd.DataFrame({c: np.zeros(0) for c in SCR_COLUMNS})

    def nothing(shares: dict) -> tuple[dict, pd.DataFrame, dict, dict]:
        cols = {"time_s": times_a, "eda_us": np.full(n_a, np.nan),
                "eda_tonic_us": np.full(n_a, np.nan), "eda_phasic_us": np.full(n_a, np.nan),
                "eda_valid": np.zeros(n_a, dtype=bool)}
        return cols, empty_scrs, shares, {}

    if x.size < 4 or not np.isfinite(x).any():
        notes.append("no usable skin conductance samples")
        return nothing({"missing": 1.0, "total": 1.0})

    # 2. artifacts
    raw = RawEda(x, fs, motion_g)
    validity = assess(raw, cfg.eda, cfg.max_interp_s)
    del raw
    if validity.invalid.all():
        notes.append("every skin conductance sample is invalid")
        return nothing(dict(validity.shares))

    # 3. decimation to the kept rate, then the low-pass (cut-off kept below the
    #    kept rate's Nyquist rate)
    fc = effective_lowpass_hz(fa, cfg.eda)
    if fc < cfg.eda.lowpass_hz:
        notes.append(f"low-pass cut-off lowered to {fc:g} Hz for a {fa:g} Hz signal")
    lp_cfg = cfg.eda.model_copy(update={"lowpass_hz": fc})
    gap_free = bridged(x, validity, in_place=x_is_ours)
    kept = decimate_cic(gap_free, step)
    del gap_free
    cleaned = lowpass_butterworth(kept, fa, lp_cfg)
    del kept
    invalid = np.ascontiguousarray(validity.invalid[::step])
    shares = dict(validity.shares)
    del validity

    # 4-5. decomposition and SCRs
    dec = decompose(cleaned, fa, cfg.decomposition)
    notes.extend(dec.notes)
    found = score_scrs(dec.phasic, cleaned, ~invalid, fa, cfg.scr)
    scrs = scr_table(found, times_a)
    tonic, phasic = dec.tonic, dec.phasic
    del dec
    for arr in (cleaned, tonic, phasic):
        np.copyto(arr, np.nan, where=invalid)
    columns = {"time_s": times_a, "eda_us": cleaned, "eda_tonic_us": tonic,
               "eda_phasic_us": phasic, "eda_valid": ~invalid}
    methods = {"eda_artifact_rules": ",".join(cfg.eda.rules),
               "eda_lowpass": "butterworth",
               "eda_decomposition": cfg.decomposition.method,
               "scr_scoring": cfg.scr.method}
    return columns, scrs, shares, methods
