"""Run every benchmark of screenweave in turn (`make bench`).

Each writes its figures to benchmarks/results/ and prints a table; they are scripts,
never timed tests. Run them on an otherwise idle machine.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
SCRIPTS = ["signals_vs_neurokit.py", "mixed_fit.py", "scaling.py", "floor.py",
           "long_and_wide.py"]


def main() -> int:
    for name in SCRIPTS:
        print(f"\n===== {name}", flush=True)
        code = subprocess.call([sys.executable, str(HERE / name)], cwd=HERE)
        if code:
            print(f"{name} failed with exit status {code}", file=sys.stderr)
            return code
    return 0


if __name__ == "__main__":
    sys.exit(main())
