"""Benchmark: the signals stage against NeuroKit2's ``eda_process``, side by side.

Both run in this one process on the same simulated recording: ``neurokit2.eda_simulate``
(10 hours at 32 Hz by default, one skin conductance response every 30 s, whose starts
are known). Reported:

* throughput (samples per second) of ``pipeline.signals.process_recording`` and of
  ``neurokit2.eda_process``, and their ratio (target: at least 30);
* SCR detection F1 of each against the simulated truth (target: ours at least
  NeuroKit2's); a detected peak matches a simulated response when it lies within
  [start - 0.5 s, start + 3 s) of it, one to one;
* peak memory of the stage (Python's ``tracemalloc``, which sees numpy's arrays)
  against the recording's own array size (time_s + eda_us; target: at most 3x).

Usage::

    .venv/bin/python benchmarks/signals_vs_neurokit.py            # 10 h, 32 Hz
    .venv/bin/python benchmarks/signals_vs_neurokit.py --hours 1 --json out.json

This is a benchmark, not a test: it prints its figures (and writes them as JSON when
asked) and exits 0 whether or not the targets are met.
"""

from __future__ import annotations

import argparse
import json
import platform
import time
import tracemalloc
import warnings

import numpy as np


def simulate(hours: float, fs: int, seed: int, noise: float = 0.01
             ) -> tuple[np.ndarray, np.ndarray]:
    """NeuroKit2's own simulated EDA and the starts of its responses."""
    import neurokit2 as nk

    duration = int(round(hours * 3600))
    scr_number = duration // 30
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        eda = nk.eda_simulate(duration=duration, sampling_rate=fs, scr_number=scr_number,
                              noise=noise, drift=0.0, random_state=seed)
    starts = np.linspace(0, duration, scr_number, endpoint=False)
    return np.asarray(eda, dtype=float), starts


def f1_against(peaks_s: np.ndarray, starts: np.ndarray) -> dict:
    """Precision, recall and F1 of detected peaks against the simulated responses."""
    peaks_s = np.sort(np.asarray(peaks_s, dtype=float))
    lo, hi = starts - 0.5, starts + 3.0
    # responses are 30 s apart, so each peak can fall in at most one window
    k = np.searchsorted(starts, peaks_s, side="right") - 1
    inside = (k >= 0) & (peaks_s >= lo[np.maximum(k, 0)]) & (peaks_s < hi[np.maximum(k, 0)])
    matched = np.unique(k[inside]).size  # one to one: a window counts once
    precision = matched / peaks_s.size if peaks_s.size else 0.0
    recall = matched / starts.size
    f1 = 2 * precision * recall / (precision + recall) if matched else 0.0
    return {"found": int(peaks_s.size), "matched": int(matched), "truth": int(starts.size),
            "precision": precision, "recall": recall, "f1": f1}


def run(hours: float, fs: int, seed: int, repeats: int, noise: float = 0.01) -> dict:
    import neurokit2 as nk

    from pipeline.config import SignalSettings
    from pipeline.signals import process_recording
    from pipeline.types import Recording

    t0 = time.perf_counter()
    eda, starts = simulate(hours, fs, seed, noise)
    simulate_s = time.perf_counter() - t0
    n = eda.size
    rec = Recording(time_s=np.arange(n) / fs, channels={"eda_us": eda})
    cfg = SignalSettings()

    ours_t, nk_t = [], []
    ours = theirs = None
    process_recording(rec, cfg)  # warm-up (imports, caches)
    for _ in range(repeats):  # interleaved, so both see the same machine load
        for _ in range(3):
            a = time.perf_counter()
            ours = process_recording(rec, cfg)
            ours_t.append(time.perf_counter() - a)
        a = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            _, theirs = nk.eda_process(eda, sampling_rate=fs)
        nk_t.append(time.perf_counter() - a)

    tracemalloc.start()
    process_recording(rec, cfg)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    ours_best, nk_best = min(ours_t), min(nk_t)
    result = {
        "recording": {"hours": hours, "sampling_rate_hz": fs, "samples": n,
                      "array_bytes": rec.nbytes, "simulated_scrs": int(starts.size),
                      "simulate_s": simulate_s, "seed": seed, "noise": noise},
        "ours": {"seconds_best": ours_best, "seconds_median": float(np.median(ours_t)),
                 "samples_per_s": n / ours_best,
                 "detection": f1_against(ours.scrs["peak_s"].to_numpy(), starts)},
        "neurokit2": {"seconds_best": nk_best, "seconds_median": float(np.median(nk_t)),
                      "samples_per_s": n / nk_best,
                      "detection": f1_against(np.asarray(theirs["SCR_Peaks"]) / fs, starts),
                      "version": nk.__version__},
        "throughput_ratio": nk_best / ours_best,
        "peak_memory_bytes": int(peak),
        "peak_memory_ratio": peak / rec.nbytes,
        "machine": {"python": platform.python_version(), "processor": platform.processor()
                    or platform.machine()},
    }
    result["targets"] = {
        "throughput_ratio_at_least_30": result["throughput_ratio"] >= 30,
        "f1_at_least_neurokit2": result["ours"]["detection"]["f1"]
        >= result["neurokit2"]["detection"]["f1"],
        "peak_memory_at_most_3x": result["peak_memory_ratio"] <= 3,
    }
    return result


def report(r: dict) -> str:
    rec, o, k = r["recording"], r["ours"], r["neurokit2"]
    lines = [
        f"recording: {rec['hours']:g} h at {rec['sampling_rate_hz']} Hz = {rec['samples']:,} "
        f"samples ({rec['array_bytes'] / 1e6:.1f} MB of arrays), {rec['simulated_scrs']} "
        f"simulated SCRs (neurokit2.eda_simulate, noise {rec['noise']:g})",
        f"{'':22s}{'best s':>9s}{'median s':>10s}{'samples/s':>14s}{'F1':>7s}"
        f"{'precision':>11s}{'recall':>8s}",
    ]
    for name, d in (("screenweave signals", o), (f"neurokit2 {k['version']}", k)):
        det = d["detection"]
        lines.append(f"{name:22s}{d['seconds_best']:9.3f}{d['seconds_median']:10.3f}"
                     f"{d['samples_per_s']:14,.0f}{det['f1']:7.3f}{det['precision']:11.3f}"
                     f"{det['recall']:8.3f}")
    lines += [
        f"throughput ratio: {r['throughput_ratio']:.1f}x (target >= 30x)",
        f"peak memory: {r['peak_memory_bytes'] / 1e6:.1f} MB = {r['peak_memory_ratio']:.2f}x "
        "the recording's arrays (target <= 3x)",
        "targets: " + ", ".join(f"{k}={'met' if v else 'NOT met'}"
                                for k, v in r["targets"].items()),
    ]
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hours", type=float, default=10.0, help="recording length (h)")
    ap.add_argument("--fs", type=int, default=32, help="sampling rate (Hz)")
    ap.add_argument("--seed", type=int, default=2024, help="simulation seed")
    ap.add_argument("--repeats", type=int, default=3, help="rounds of timing")
    ap.add_argument("--noise", type=float, default=0.01,
                    help="eda_simulate noise amplitude (its default 0.01)")
    ap.add_argument("--json", default=None, help="also write the figures to this file")
    args = ap.parse_args()
    result = run(args.hours, args.fs, args.seed, args.repeats, args.noise)
    print(report(result))
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(result, fh, indent=2)


if __name__ == "__main__":
    main()
