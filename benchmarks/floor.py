"""The least a run can cost on 2 cores, against the target of a tenth of NeuroKit2's time.

scaling.py times whole runs; this script takes one apart, to show how much the target
"the whole run in at most a tenth of NeuroKit2's EDA processing time" leaves for the
work itself. On a study made by `synth` (by default the scaling benchmark's large
study: 120 sessions of 4 hours at 32 Hz, same seed), each figure the median of
--repeat measurements, each in a fresh subprocess:

* start-up: a fresh Python that imports the stage modules
  (``pipeline.execution.STAGE_MODULES``), timed from outside, interpreter start
  included. A serial run spends it before its first session, and so does the fork
  server of a parallel run before its first worker starts;
* reading: every recording read and checked by the run's own reader, by two processes
  at once, each reading half of them (imports not counted): the least the
  per-session work can cost on 2 cores;
* per-session work: a sample of sessions put through the run's own per-session tasks
  (``prepare_cached`` then ``finish_session``: read, signals, alignment, cache file,
  arousal, metrics, switch-locked arousal, coder agreement, timeline file), one after
  another in one process set up as a worker is (after one session to warm up); and the
  reading of the same recordings alone, so that the rest is their difference;
* NeuroKit2's ``eda_process`` on the study's recordings (scaling.py's baseline script).

The budget it prints: a tenth of NeuroKit2's time, less the start-up and the
2-process reading, shared by all sessions on 2 cores. That is the CPU time per
session left for everything but reading, and it is set against what that part costs
now. The budget is generous: it leaves out the group phase (models, tables, manifest)
and all cost of moving tasks between processes.

    .venv/bin/python benchmarks/floor.py                      # 120 sessions
    .venv/bin/python benchmarks/floor.py --keep /tmp/ccb --reuse   # scaling.py's studies
    .venv/bin/python benchmarks/floor.py --size small --repeat 1   # a quick look

Results go to benchmarks/results/floor.json (floor_<size>.json for other sizes).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import tempfile
import time
from pathlib import Path

from scaling import BIN, NK_MAX_FILES, RESULTS, SIZES, make_study, neurokit_baseline

from pipeline.execution import STAGE_MODULES

#: the target: the whole run in at most this share of NeuroKit2's time
TARGET_SHARE = 0.1
#: processes the budget shares the work between (the machine's cores)
CORES = 2

IMPORT_SCRIPT = "import " + ", ".join(STAGE_MODULES)

READ_SCRIPT = r"""
import sys, time
from pathlib import Path
from pipeline.config import resolve_study
from pipeline.execution import _limit_threads
from pipeline.ingest import read_recording_checked
_limit_threads()
_, cfg, _ = resolve_study(sys.argv[1])
files = [Path(p) for p in sys.argv[2:]]
each = []
for f in files:
    t = time.perf_counter()
    read_recording_checked(f, cfg.signals, label=f.name)
    each.append(time.perf_counter() - t)
print(sum(each), *each)
"""

SESSION_SCRIPT = r"""
import sys, time
from pathlib import Path
from pipeline import runner as R
from pipeline.config import resolve_study
from pipeline.execution import _start_worker, STAGE_MODULES
from pipeline.ingest import read_study_head, read_study_rest
_start_worker(STAGE_MODULES)  # memory and thread settings and imports, as a worker
folder, cfg, _ = resolve_study(sys.argv[1])
sample, scratch = int(sys.argv[2]), Path(sys.argv[3])
head = read_study_head(folder, cfg)
recs = R.recording_inputs(head)
study = read_study_rest(head, cfg)
codes = {}
inputs, _ = R.session_inputs(study, cfg, recs, codes)
step = max(1, len(recs) // sample)
picked = list(range(0, len(recs), step))[:sample + 1]
each = []
for i in picked:
    t = time.perf_counter()
    cache = scratch / f"cache_{i}.pkl"
    done = R.prepare_cached(R.PrepareTask(inputs=recs[i], cfg=cfg, cache_file=cache,
                                          fresh=True))
    mean, sd, _ = R._combine_moments([done.moments])
    R.finish_session(R.FinishTask(inputs=inputs[i], mean=mean, sd=sd, cfg=cfg,
                                  cache_file=cache,
                                  timeline_file=scratch / f"timeline_{i}.parquet",
                                  agreement_codes=codes.get(i)))
    each.append(time.perf_counter() - t)
    cache.unlink()
print(*each[1:])  # the first session warms up (first calls, first page faults)
print(*(str(recs[i].recording_path) for i in picked[1:]))
"""


def _python(script: str, *args: str) -> list[str]:
    out = subprocess.run([str(BIN / "python"), "-c", script, *args], check=True,
                         capture_output=True, text=True).stdout
    return out.strip().splitlines()


def startup_s() -> float:
    """Wall time of a fresh Python importing the stage modules, start included."""
    t = time.perf_counter()
    subprocess.run([str(BIN / "python"), "-c", IMPORT_SCRIPT], check=True)
    return time.perf_counter() - t


def read_in_two(study: Path, files: list[Path]) -> float:
    """Seconds until two processes at once have each read and checked half of
    ``files`` (imports not counted): the longer of the two."""
    halves = [files[0::2], files[1::2]]
    procs = [subprocess.Popen([str(BIN / "python"), "-c", READ_SCRIPT, str(study),
                               *map(str, half)], stdout=subprocess.PIPE, text=True)
             for half in halves]
    totals = []
    for p in procs:
        out, _ = p.communicate()
        if p.returncode:
            raise SystemExit(f"reading recordings failed ({p.returncode})")
        totals.append(float(out.split()[0]))
    return max(totals)


def session_work(study: Path, sample: int) -> tuple[list[float], list[float]]:
    """Seconds of each sampled session's per-session tasks, and of reading and checking
    the same recordings alone (both in one process, after one session to warm up)."""
    with tempfile.TemporaryDirectory(prefix="screenweave-floor-") as scratch:
        lines = _python(SESSION_SCRIPT, str(study), str(sample), scratch)
    each = [float(x) for x in lines[0].split()]
    files = lines[1].split()
    # READ_SCRIPT prints its total, then each file's time; the first file is read once
    # more at the start, to warm up, and left out
    timed = _python(READ_SCRIPT, str(study), files[0], *files)[0].split()[2:]
    return each, [float(x) for x in timed]


def neurokit_per_file(study: Path) -> float:
    seconds, _, files = neurokit_baseline(study / "signals")
    return seconds / files


def budget(n_sessions: int, nk_per_file_s: float, startup: float, read_two: float,
           per_session_rest_s: float) -> dict:
    """What the target leaves per session for everything but reading (CPU seconds on
    one core), and how many times that the work costs now."""
    nk_total = nk_per_file_s * n_sessions
    allowed = TARGET_SHARE * nk_total
    left = allowed - startup - read_two
    per_session = CORES * left / n_sessions
    return {
        "neurokit2_total_s": nk_total,
        "target_run_s": allowed,
        "left_after_startup_and_reading_s": left,
        "budget_per_session_s": per_session,
        "per_session_rest_now_s": per_session_rest_s,
        "times_over_budget": (per_session_rest_s / per_session if per_session > 0
                              else None),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", choices=list(SIZES), default="large")
    ap.add_argument("--hours", type=float, default=4.0)
    ap.add_argument("--rate-hz", type=float, default=32.0)
    ap.add_argument("--keep", type=Path, default=None, help="work folder to keep")
    ap.add_argument("--reuse", action="store_true",
                    help="with --keep: reuse a study made there before (by this script "
                    "or scaling.py)")
    ap.add_argument("--repeat", type=int, default=5,
                    help="measure each figure this many times and keep the median")
    ap.add_argument("--sample", type=int, default=20,
                    help="sessions put through the per-session tasks")
    args = ap.parse_args()
    if args.repeat < 1 or args.sample < 1:
        ap.error("--repeat and --sample must be at least 1")
    work = args.keep or Path(tempfile.mkdtemp(prefix="screenweave-floor-"))
    work.mkdir(parents=True, exist_ok=True)
    ppc, sessions = SIZES[args.size]
    study = make_study(work / f"study_{args.size}", ppc, sessions, args.hours,
                       args.rate_hz, reuse=args.reuse and args.keep is not None)
    files = sorted((study / "signals").glob("*.parquet"))
    n = len(files)

    starts, reads, rests, totals, nks = [], [], [], [], []
    for _ in range(args.repeat):
        starts.append(startup_s())
        reads.append(read_in_two(study, files))
        each, alone = session_work(study, args.sample)
        totals.append(statistics.median(each))
        rests.append(statistics.median(each) - statistics.median(alone))
        nks.append(neurokit_per_file(study))
    row = {
        "size": args.size, "sessions": n,  # synth studies: one recording per session
        "startup_s": statistics.median(starts), "startup_s_each": starts,
        "read_two_processes_s": statistics.median(reads), "read_two_processes_s_each": reads,
        "per_session_work_s": statistics.median(totals),
        "per_session_work_s_each": totals,
        "per_session_rest_s": statistics.median(rests), "per_session_rest_s_each": rests,
        "sessions_sampled": args.sample,
        "neurokit2_per_file_s": statistics.median(nks), "neurokit2_per_file_s_each": nks,
        "neurokit2_files_measured": min(n, NK_MAX_FILES),
    }
    row["budget"] = budget(n, row["neurokit2_per_file_s"], row["startup_s"],
                           row["read_two_processes_s"], row["per_session_rest_s"])
    RESULTS.mkdir(parents=True, exist_ok=True)
    target = RESULTS / ("floor.json" if args.size == "large" else f"floor_{args.size}.json")
    target.write_text(json.dumps({"repeat": args.repeat, "cores": CORES,
                                  "target_share": TARGET_SHARE, "row": row}, indent=2) + "\n")
    b = row["budget"]
    print(f"{n} sessions; NeuroKit2 {row['neurokit2_per_file_s']:.3f} s per file, "
          f"{b['neurokit2_total_s']:.1f} s in all; a tenth: {b['target_run_s']:.2f} s")
    print(f"start-up (Python and the stage modules): {row['startup_s']:.2f} s")
    print(f"reading every recording, two processes at once: "
          f"{row['read_two_processes_s']:.2f} s")
    print(f"left for everything else: {b['left_after_startup_and_reading_s']:.2f} s, "
          f"{b['budget_per_session_s'] * 1e3:.1f} ms per session on one core")
    print(f"per-session work now: {row['per_session_work_s'] * 1e3:.1f} ms, of which "
          f"{row['per_session_rest_s'] * 1e3:.1f} ms is not reading: "
          + (f"{b['times_over_budget']:.2f} times the budget" if b["times_over_budget"]
             else "no budget left at all"))
    print(f"wrote {target}")


if __name__ == "__main__":
    main()
