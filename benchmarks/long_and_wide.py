"""Long and wide inputs: peak memory of `screenweave run` on
(a) 24-hour sessions at 64 Hz (5.5 million samples per recording), and
(b) a study of 300 participants' media logs (2-hour evenings, light 4 Hz signals).

Each study is made by `screenweave synth`; `run` executes in a subprocess with one
worker and the peak RSS of its process tree is sampled every 50 ms.

    .venv/bin/python benchmarks/long_and_wide.py
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

from scaling import BIN, RESULTS, peak_memory

CASES = {
    # name: (participants per cohort, sessions, hours, rate)
    "long_24h_64hz": (1, 1, 24.0, 64.0),
    "wide_300_participants": (150, 1, 2.0, 4.0),
}


def main() -> None:
    work = Path(tempfile.mkdtemp(prefix="screenweave-longwide-"))
    rows = []
    for name, (ppc, sessions, hours, rate) in CASES.items():
        study = work / name
        subprocess.run([str(BIN / "screenweave"), "synth", str(study),
                        "--participants-per-cohort", str(ppc), "--sessions", str(sessions),
                        "--hours", str(hours), "--rate-hz", str(rate), "--seed", "5",
                        "--force"], check=True, stdout=subprocess.DEVNULL)
        log_rows = sum(1 for _ in open(study / "media_log.csv")) - 1
        samples = None
        import pandas as pd

        recs = sorted((study / "signals").glob("*.parquet"))
        samples = max(pd.read_parquet(r, columns=["time_s"]).shape[0] for r in recs)
        m = peak_memory([str(BIN / "screenweave"), "run", str(study), "--out", str(work / f"out_{name}"),
                         "--workers", "1", "--fresh", "--quiet", "--no-report"])
        rows.append({"case": name, "participants": 2 * ppc, "sessions": 2 * ppc * sessions,
                     "hours_per_session": hours, "rate_hz": rate, "media_log_rows": log_rows,
                     "largest_recording_samples": samples,
                     "largest_recording_mb_float64": samples * 6 * 8 / 2**20,
                     "wall_s": m["wall_s"], "peak_rss_mb": m["peak_rss_mb"]})
        print(json.dumps(rows[-1], indent=1), flush=True)
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / "long_and_wide.json").write_text(json.dumps(rows, indent=2) + "\n")
    print("\n| case | sessions | media log rows | largest recording (samples) | wall (s) | peak RSS (MB) |")
    print("|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['case']} | {r['sessions']} | {r['media_log_rows']} | "
              f"{r['largest_recording_samples']} | {r['wall_s']:.1f} | {r['peak_rss_mb']:.0f} |")


if __name__ == "__main__":
    sys.exit(main())
