"""Scaling benchmark: the whole `screenweave run` at three study sizes.

For each size a reference study is made by `screenweave synth` (4-hour sessions at
32 Hz, artifacts and clock drift on). Measured, each in a fresh subprocess:

* wall time and throughput (participant-hours per second) of `run --workers 1` and
  `run --workers 2` (the per-session cache is bypassed with --fresh), with nothing
  else running;
* peak memory of the whole process tree (the runner, the workers' fork server and the
  workers), sampled in runs of their own (the sampling slows a run that uses both
  cores): summed resident set sizes (RSS) and summed proportional set sizes (PSS,
  which counts pages shared by forked workers once);
* the run's own stage timings (``timings_s`` of its manifest);
* the machine's own ceiling: the speedup of 2 processes over 1 on a perfectly parallel,
  purely compute-bound task (no run can beat it);
* the peer baseline a researcher would otherwise script: NeuroKit2's
  ``eda_process`` on the EDA channel of every recording of the study (EDA
  processing alone, no alignment, metrics, models or report);
* from the three sizes, straight lines of wall time against sessions (fixed seconds
  plus seconds per session, 1 and 2 workers) and the study size from which they give
  2 workers a speedup of 1.7;
* a reference for the 2-worker run: the study split into two halves by participant
  (alternately down the roster sorted by cohort, so each half holds both cohorts and
  half the sessions) and `run --workers 1` on both halves at once, each its own
  process with its own start-up, reading, models and writing. What one machine gives
  two fully independent serial runs at that moment: a 2-worker run as fast as this
  pair loses nothing to its pool, and the speedup of 1 worker over the pair is what
  splitting the work by hand would reach.

Results go to benchmarks/results/scaling.json and a Markdown table on stdout.

    .venv/bin/python benchmarks/scaling.py            # sizes 12, 40, 120 sessions
    .venv/bin/python benchmarks/scaling.py --quick    # 4 and 8 sessions, for a smoke run
    .venv/bin/python benchmarks/scaling.py --repeat 3 # medians of 3 runs (default 5)
    .venv/bin/python benchmarks/scaling.py --keep /tmp/w --reuse --only large
                                      # re-measure one size on studies made before
    .venv/bin/python benchmarks/scaling.py --only small --only xlarge
                                      # memory from 12 to 240 sessions (not a target)
    .venv/bin/python benchmarks/scaling.py --refit benchmarks/results/scaling.json
                                      # wall-time lines of a results file, no runs

Partial runs write benchmarks/results/scaling_quick.json (--quick) or
scaling_<sizes>.json (--only; e.g. scaling_small_xlarge.json).
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parent.parent
BIN = Path(sys.executable).parent
RESULTS = ROOT / "benchmarks" / "results"

#: (participants per cohort, sessions per participant): 2 cohorts each
SIZES = {"small": (3, 2), "medium": (10, 2), "large": (30, 2)}
QUICK = {"small": (1, 2), "medium": (2, 2)}
#: Twice the largest size, measured only on request (--only xlarge): how memory goes on
#: past the three sizes of the targets.
EXTRA = {"xlarge": (60, 2)}


PAGE = os.sysconf("SC_PAGE_SIZE")


def _rss(pid: int) -> int:
    """Resident set size of one process (bytes), from /proc/PID/statm (cheap)."""
    with open(f"/proc/{pid}/statm") as fh:
        return int(fh.read().split()[1]) * PAGE


def _pss(pid: int) -> int:
    """Proportional set size of one process (bytes), from /proc/PID/smaps_rollup."""
    with open(f"/proc/{pid}/smaps_rollup") as fh:
        for line in fh:
            if line.startswith("Pss:"):
                return int(line.split()[1]) * 1024
    return 0


def _raise_if_failed(cmd: list[str], code: int, log) -> None:
    """Stop the benchmark with the command's last messages when it failed (``log``: the
    temporary file its messages went to)."""
    if code != 0:
        log.seek(0)
        err = log.read().decode(errors="replace")
        raise SystemExit(f"command failed ({code}): {' '.join(cmd)}\n{err[-2000:]}")


def peak_memory(cmd: list[str]) -> dict:
    """Run a command; return the peak memory of its process tree (and its wall seconds,
    which the sampling itself slows down: see :func:`wall_time`).

    Two memory figures: the peak of the summed resident set sizes (RSS) of the
    process and its children, sampled every 50 ms, and the peak of their summed
    proportional set sizes (PSS), sampled every 250 ms. Forked workers share the
    pages of the libraries they import before the fork; RSS counts those once per
    process, PSS splits them between the processes that share them. The sampler reads
    /proc/PID/statm and /proc/PID/smaps_rollup, and finds the children every 250 ms
    (reading the whole smaps file every time, as psutil's memory_full_info does, cost a
    2-worker run up to a second on 2 cores).
    """
    log = tempfile.TemporaryFile()  # not a pipe: see wall_time
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT)
    root = psutil.Process(proc.pid)
    peak, peak_pss, tick = 0, 0, 0
    pids = [proc.pid]
    while proc.poll() is None:
        if tick % 5 == 0:
            try:
                pids = [proc.pid] + [c.pid for c in root.children(recursive=True)]
            except psutil.NoSuchProcess:
                pass
        rss = pss = 0
        for pid in pids:
            try:
                rss += _rss(pid)
                if tick % 5 == 0:
                    pss += _pss(pid)
            except (FileNotFoundError, ProcessLookupError, PermissionError, ValueError):
                pass
        peak = max(peak, rss)
        peak_pss = max(peak_pss, pss)
        tick += 1
        time.sleep(0.05)
    wall = time.perf_counter() - start
    with log:
        _raise_if_failed(cmd, proc.returncode, log)
    return {"wall_s": wall, "peak_rss_mb": peak / 2**20, "peak_pss_mb": peak_pss / 2**20}


def wall_time(cmds: list[list[str]]) -> float:
    """Start the commands at once; return the wall seconds until the last one ends.

    Nothing else runs meanwhile: the memory sampler of :func:`peak_memory` slows a run
    that keeps both cores busy (measured on 2026-12-03 at 120 sessions, 2 workers, in
    the order sampled, plain, plain, sampled, twice: 10.4, 8.7, 8.2, 9.0 s sampled
    against 8.8, 8.5, 7.8, 7.7 s not; the sampler itself used about 0.7 s of CPU per
    run), while a 1-worker run leaves it a core of its own, so timing both with it
    running would understate the speedup. Wall times are therefore measured in runs of
    their own.
    """
    # messages go to files, not pipes: a pipe nobody reads until the end can fill up
    # and stall the command writing to it
    logs = [tempfile.TemporaryFile() for _ in cmds]
    start = time.perf_counter()
    procs = [subprocess.Popen(c, stdout=subprocess.DEVNULL, stderr=log)
             for c, log in zip(cmds, logs)]
    codes = [p.wait() for p in procs]
    wall = time.perf_counter() - start
    for cmd, code, log in zip(cmds, codes, logs):
        with log:
            _raise_if_failed(cmd, code, log)
    return wall


def split_study(study: Path, halves: tuple[Path, Path]) -> list[int]:
    """Write two studies of half the participants of ``study`` each: every second
    participant down the roster sorted by cohort and ID, so that each half holds both
    cohorts. Rows of the CSV files are kept by their ``participant_id``; recordings
    are hard-linked (copied where links are not possible); other files are copied.
    Handles the layout ``synth`` writes (tables at the top, recordings in signals/;
    its truth/ folder is not an input and is left out). Returns the number of
    sessions of each half."""
    other = sorted(d.name for d in study.iterdir()
                   if d.is_dir() and d.name not in ("signals", "truth"))
    if other:
        raise SystemExit(f"cannot split {study}: its folders {other} are not handled")
    with open(study / "roster.csv", newline="", encoding="utf-8") as fh:
        roster = sorted(csv.DictReader(fh), key=lambda r: (r["cohort"], r["participant_id"]))
    ids = [r["participant_id"] for r in roster]
    sessions = []
    for half, keep in zip(halves, (set(ids[0::2]), set(ids[1::2]))):
        if half.exists():
            shutil.rmtree(half)
        half.mkdir(parents=True)
        for src in sorted(study.iterdir()):
            if src.suffix == ".csv":
                with open(src, newline="", encoding="utf-8") as fh:
                    rows = list(csv.reader(fh))
                col = rows[0].index("participant_id")
                kept = [rows[0]] + [r for r in rows[1:] if r[col] in keep]
                with open(half / src.name, "w", newline="", encoding="utf-8") as fh:
                    csv.writer(fh, lineterminator="\n").writerows(kept)
                if src.name == "sessions.csv":
                    sessions.append(len(kept) - 1)
            elif src.is_file():
                shutil.copy2(src, half / src.name)
        (half / "signals").mkdir()
        for rec in sorted((study / "signals").iterdir()):
            if rec.name.split("__", 1)[0] in keep:
                try:
                    os.link(rec, half / "signals" / rec.name)
                except OSError:
                    shutil.copy2(rec, half / "signals" / rec.name)
    return sessions


NK_SCRIPT = r"""
import sys, time, warnings
from pathlib import Path
import numpy as np, pandas as pd, neurokit2 as nk
warnings.filterwarnings("ignore")
files = sorted(Path(sys.argv[1]).glob("*.parquet"))
limit = int(sys.argv[2])
step = max(1, len(files) // limit)
files = files[::step][:limit]
t0 = time.perf_counter()
hours = 0.0
for f in files:
    d = pd.read_parquet(f, columns=["time_s", "eda_us"])
    hours += (d["time_s"].iloc[-1] - d["time_s"].iloc[0]) / 3600
    fs = 1.0 / float(np.median(np.diff(d["time_s"].to_numpy())))
    eda = d["eda_us"].to_numpy(dtype=float)
    eda = pd.Series(eda).interpolate(limit_direction="both").to_numpy()
    nk.eda_process(eda, sampling_rate=int(round(fs)))
print(time.perf_counter() - t0, hours, len(files))
"""

CEILING_SCRIPT = r"""
import time, multiprocessing as mp
import numpy as np
def work(_):
    a = np.random.default_rng(0).random(2_000_000)
    return sum(float(np.sort(a)[1000]) for _ in range(12))
if __name__ == "__main__":
    t = time.perf_counter(); [work(i) for i in range(4)]; serial = time.perf_counter() - t
    with mp.Pool(2) as pool:
        pool.map(work, range(2))  # warm the workers up
        t = time.perf_counter(); pool.map(work, range(4)); two = time.perf_counter() - t
    print(serial / two)
"""


def machine_ceiling(repeat: int = 5) -> list[float]:
    """Speedup of 2 processes over 1 on a purely compute-bound, perfectly parallel task
    (sorting arrays): what this machine allows any 2-worker run at best. One figure
    per repeat (a shared machine's figure varies from minute to minute)."""
    out = []
    for _ in range(repeat):
        text = subprocess.run([str(BIN / "python"), "-c", CEILING_SCRIPT], check=True,
                              capture_output=True, text=True).stdout
        out.append(float(text.strip().splitlines()[-1]))
    return out


#: NeuroKit2 is run on at most this many recordings of a study (evenly spaced); its
#: time for the whole study is extrapolated by the number of recordings (all of one
#: length), and the JSON says so.
NK_MAX_FILES = 40


def neurokit_baseline(signals: Path) -> tuple[float, float, int]:
    """NeuroKit2's EDA processing of at most NK_MAX_FILES recordings in ``signals``
    (evenly spaced), in a fresh Python: (seconds, hours of recording, files)."""
    nk = subprocess.run([str(BIN / "python"), "-c", NK_SCRIPT, str(signals),
                         str(NK_MAX_FILES)], capture_output=True, text=True)
    if nk.returncode != 0:
        raise SystemExit(f"NeuroKit2 baseline failed ({nk.returncode}):\n"
                         f"{nk.stderr[-2000:]}")
    seconds, hours, files = map(float, nk.stdout.strip().splitlines()[-1].split())
    return seconds, hours, int(files)


def make_study(study: Path, ppc: int, sessions: int, hours: float, rate: float,
               reuse: bool = False) -> Path:
    """The benchmark's study at ``study``, made by `synth` with the script's seed (or,
    with ``reuse``, the one an earlier run made there)."""
    synth = [str(BIN / "screenweave"), "synth", str(study), "--participants-per-cohort",
             str(ppc), "--sessions", str(sessions), "--hours", str(hours), "--rate-hz",
             str(rate), "--seed", "11", "--force"]
    if reuse and (study / "sessions.csv").is_file():
        print(f"   reusing {study}", flush=True)
    else:
        subprocess.run(synth, check=True, stdout=subprocess.DEVNULL)
    return study


def bench_size(name: str, ppc: int, sessions: int, hours: float, rate: float,
               work: Path, reuse: bool = False, repeat: int = 5,
               memory_repeat: int = 2) -> dict:
    study = make_study(work / f"study_{name}", ppc, sessions, hours, rate, reuse)
    import pandas as pd

    table = pd.read_csv(study / "sessions.csv")
    n_sessions = len(table)
    span = (pd.to_datetime(table["end"], utc=True) - pd.to_datetime(table["start"], utc=True))
    participant_hours = float(span.dt.total_seconds().sum() / 3600)
    row = {"size": name, "sessions": n_sessions, "participant_hours": participant_hours,
           "rate_hz": rate, "study_mb": sum(p.stat().st_size for p in study.rglob("*")
                                           if p.is_file()) / 2**20}
    halves = (work / f"study_{name}_half_a", work / f"study_{name}_half_b")
    row["two_halves_sessions"] = split_study(study, halves)

    def run_cmd(target: Path, out: Path, workers: int) -> list[str]:
        return [str(BIN / "screenweave"), "run", str(target), "--out", str(out),
                "--workers", str(workers), "--fresh", "--quiet", "--no-report"]

    # Each wall time is measured `repeat` times (1 worker, 2 workers and the two halves
    # interleaved, so that a slow spell of a shared machine touches all three) and the
    # median is reported; every single figure is kept in the JSON. Peak memory comes
    # from `memory_repeat` further runs of each, sampled (see wall_time), the highest
    # kept.
    walls: dict[int, list[float]] = {1: [], 2: []}
    stages: dict[int, list[dict]] = {1: [], 2: []}
    together: list[float] = []
    for _ in range(repeat):
        for workers in (1, 2):
            out = work / f"out_{name}_{workers}"
            walls[workers].append(wall_time([run_cmd(study, out, workers)]))
            stages[workers].append(
                json.loads((out / "manifest.json").read_text()).get("timings_s", {}))
        together.append(wall_time([run_cmd(h, work / f"out_{h.name}", 1) for h in halves]))
    for workers in (1, 2):
        mems = [peak_memory(run_cmd(study, work / f"out_{name}_{workers}", workers))
                for _ in range(memory_repeat)]
        wall = statistics.median(walls[workers])
        row[f"wall_s_workers{workers}"] = wall
        row[f"wall_s_workers{workers}_each"] = walls[workers]
        row[f"peak_rss_mb_workers{workers}"] = max(m["peak_rss_mb"] for m in mems)
        row[f"peak_pss_mb_workers{workers}"] = max(m["peak_pss_mb"] for m in mems)
        row[f"peak_rss_mb_workers{workers}_each"] = [m["peak_rss_mb"] for m in mems]
        row[f"wall_s_workers{workers}_memory_runs"] = [m["wall_s"] for m in mems]
        # the stage timings of the run whose wall time is the median (or next above it)
        middle = min(range(repeat), key=lambda j: (walls[workers][j] < wall,
                                                   abs(walls[workers][j] - wall)))
        row[f"stage_s_workers{workers}"] = stages[workers][middle]
        row[f"participant_hours_per_s_workers{workers}"] = participant_hours / wall
    row["speedup_2_workers"] = row["wall_s_workers1"] / row["wall_s_workers2"]
    row["speedup_2_workers_each"] = [a / b for a, b in zip(walls[1], walls[2])]
    # the reference: two serial runs on the halves at once (see the module docstring)
    row["wall_s_two_halves_together"] = statistics.median(together)
    row["wall_s_two_halves_together_each"] = together
    row["speedup_two_halves_together"] = (row["wall_s_workers1"]
                                          / row["wall_s_two_halves_together"])
    row["workers2_vs_two_halves_together"] = (row["wall_s_workers2"]
                                              / row["wall_s_two_halves_together"])
    nks = [neurokit_baseline(study / "signals") for _ in range(repeat)]
    nk_s = statistics.median(t for t, _, _ in nks)
    _, nk_hours, nk_files = nks[0]
    row["neurokit2_files_measured"] = int(nk_files)
    row["neurokit2_hours_measured"] = nk_hours
    row["neurokit2_eda_process_s"] = nk_s * n_sessions / nk_files
    row["neurokit2_eda_process_s_each"] = [t * n_sessions / nk_files for t, _, _ in nks]
    row["neurokit2_extrapolated"] = int(nk_files) < n_sessions
    row["run_vs_neurokit2_time"] = row["wall_s_workers2"] / row["neurokit2_eda_process_s"]
    return row


def fit_lines(rows: list[dict], target: float = 1.7) -> dict:
    """Least-squares lines of wall time against the number of sessions, for 1 and 2
    workers (fixed seconds + seconds per session), and the study size from which the
    lines give 2 workers a speedup of at least ``target`` (None when they never do).
    Fixed costs (start-up, imports, reading the study, the models) do not shrink with
    workers, so a small study cannot reach the speedup a large one does."""
    import numpy as np

    n = np.array([r["sessions"] for r in rows], dtype=float)
    out: dict = {"target_speedup": target}
    for w in (1, 2):
        per, fixed = np.polyfit(n, [r[f"wall_s_workers{w}"] for r in rows], 1)
        out[f"fixed_s_workers{w}"], out[f"per_session_s_workers{w}"] = fixed, per
    # (f1 + p1 n) / (f2 + p2 n) >= target  <=>  n (p1 - target p2) >= target f2 - f1
    gain = out["per_session_s_workers1"] - target * out["per_session_s_workers2"]
    need = target * out["fixed_s_workers2"] - out["fixed_s_workers1"]
    out["sessions_for_target_speedup"] = (max(0.0, need / gain) if gain > 0 else None)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="tiny sizes, for a smoke run")
    ap.add_argument("--hours", type=float, default=4.0)
    ap.add_argument("--rate-hz", type=float, default=32.0)
    ap.add_argument("--keep", type=Path, default=None, help="work folder to keep")
    ap.add_argument("--reuse", action="store_true",
                    help="with --keep: reuse studies already made there by an earlier run")
    ap.add_argument("--repeat", type=int, default=5,
                    help="time each run this many times and report the median")
    ap.add_argument("--memory-repeat", type=int, default=2,
                    help="sample the peak memory of each run this many times, in runs "
                    "of their own, and report the highest")
    ap.add_argument("--only", choices=[*SIZES, *EXTRA], action="append",
                    help="measure only these sizes (repeatable; xlarge, 240 sessions, is "
                    "measured only when named)")
    ap.add_argument("--refit", type=Path, default=None, metavar="JSON",
                    help="measure nothing: add the wall-time lines to a results file "
                    "written before they were computed, and print them")
    args = ap.parse_args()
    if args.repeat < 1 or args.memory_repeat < 1:
        ap.error("--repeat and --memory-repeat must be at least 1")
    if args.refit:
        result = json.loads(args.refit.read_text())
        result["wall_time_lines"] = fit_lines(result["rows"])
        args.refit.write_text(json.dumps(result, indent=2) + "\n")
        _print_lines(result["wall_time_lines"])
        return
    sizes = QUICK if args.quick else SIZES | EXTRA
    hours = 0.5 if args.quick else args.hours
    work = args.keep or Path(tempfile.mkdtemp(prefix="screenweave-scaling-"))
    work.mkdir(parents=True, exist_ok=True)
    rows = []
    for name, (ppc, sessions) in sizes.items():
        if (args.only and name not in args.only) or (not args.only and name in EXTRA):
            continue
        print(f"== {name}: {2 * ppc * sessions} sessions of {hours} h", flush=True)
        rows.append(bench_size(name, ppc, sessions, hours, args.rate_hz, work,
                               reuse=args.reuse and args.keep is not None,
                               repeat=args.repeat, memory_repeat=args.memory_repeat))
        print(json.dumps(rows[-1], indent=1), flush=True)
    ceilings = machine_ceiling()
    ceiling = statistics.median(ceilings)
    result = {
        "machine": {"cores": os.cpu_count(), "memory_gb": psutil.virtual_memory().total / 2**30,
                    "python": sys.version.split()[0],
                    "two_process_ceiling_speedup": ceiling,
                    "two_process_ceiling_speedup_each": ceilings},
        "repeat": args.repeat,
        "memory_repeat": args.memory_repeat,
        "rows": rows,
        "rss_growth_smallest_to_largest_workers2": rows[-1]["peak_rss_mb_workers2"]
        / rows[0]["peak_rss_mb_workers2"],
        "pss_growth_smallest_to_largest_workers2": rows[-1]["peak_pss_mb_workers2"]
        / rows[0]["peak_pss_mb_workers2"],
    }
    if len(rows) >= 3:
        result["wall_time_lines"] = fit_lines(rows)
    RESULTS.mkdir(parents=True, exist_ok=True)
    if args.quick:
        target = RESULTS / "scaling_quick.json"
    elif args.only:
        target = RESULTS / f"scaling_{'_'.join(r['size'] for r in rows)}.json"
    else:
        target = RESULTS / "scaling.json"
    target.write_text(json.dumps(result, indent=2) + "\n")
    print("\n| size | sessions | participant-hours | workers 1 (s) | workers 2 (s) | speedup | "
          "participant-h/s (2 workers) | peak RSS 2 workers (MB) | peak PSS 2 workers (MB) | "
          "NeuroKit2 EDA alone (s) | run / NeuroKit2 |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['size']} | {r['sessions']} | {r['participant_hours']:.0f} | "
              f"{r['wall_s_workers1']:.1f} | {r['wall_s_workers2']:.1f} | "
              f"{r['speedup_2_workers']:.2f} | {r['participant_hours_per_s_workers2']:.2f} | "
              f"{r['peak_rss_mb_workers2']:.0f} | {r['peak_pss_mb_workers2']:.0f} | "
              f"{r['neurokit2_eda_process_s']:.1f} | "
              f"{r['run_vs_neurokit2_time']:.3f} |")
    print("\n| size | workers 1 (s) | two halves at once, 1 worker each (s) | speedup of the "
          "halves | workers 2 / two halves |")
    print("|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['size']} | {r['wall_s_workers1']:.1f} | "
              f"{r['wall_s_two_halves_together']:.1f} | "
              f"{r['speedup_two_halves_together']:.2f} | "
              f"{r['workers2_vs_two_halves_together']:.2f} |")
    print(f"\nwall times: medians of {args.repeat} runs each; peak memory: the highest of "
          f"{args.memory_repeat} sampled runs each; this machine's ceiling for 2 processes on a "
          f"perfectly parallel compute task: {ceiling:.2f}x (runs: "
          f"{', '.join(f'{c:.2f}' for c in ceilings)})")
    print(f"RSS growth smallest -> largest (2 workers): "
          f"{result['rss_growth_smallest_to_largest_workers2']:.2f}x (PSS "
          f"{result['pss_growth_smallest_to_largest_workers2']:.2f}x); written {target}")
    if "wall_time_lines" in result:
        _print_lines(result["wall_time_lines"])


def _print_lines(fit: dict) -> None:
    n = fit["sessions_for_target_speedup"]
    print(f"wall time = {fit['fixed_s_workers1']:.2f} s + {fit['per_session_s_workers1']:.4f} s "
          f"per session (1 worker), {fit['fixed_s_workers2']:.2f} s + "
          f"{fit['per_session_s_workers2']:.4f} s per session (2 workers): a speedup of "
          f"{fit['target_speedup']} from "
          + (f"about {n:.0f} sessions on" if n is not None else "no study size"))


if __name__ == "__main__":
    main()
