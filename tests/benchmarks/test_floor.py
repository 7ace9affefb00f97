"""benchmarks/floor.py: the budget arithmetic, and that its measuring scripts run on a
small study (their timings are measured by the script, never checked here)."""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
BIN = Path(sys.executable).parent


@pytest.fixture(scope="module")
def floor():
    sys.path.insert(0, str(ROOT / "benchmarks"))  # floor.py imports scaling.py's helpers
    try:
        spec = importlib.util.spec_from_file_location("floor", ROOT / "benchmarks" / "floor.py")
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
    finally:
        sys.path.remove(str(ROOT / "benchmarks"))
    return module


def test_budget_arithmetic(floor):
    # 120 recordings at 0.4 s each: 48 s; a tenth is 4.8 s; less 1.8 s of start-up and
    # 1.2 s of reading leaves 1.8 s, or 2 cores x 1.8 s / 120 = 30 ms a session
    b = floor.budget(120, 0.4, startup=1.8, read_two=1.2, per_session_rest_s=0.079)
    assert b["neurokit2_total_s"] == pytest.approx(48.0)
    assert b["target_run_s"] == pytest.approx(4.8)
    assert b["left_after_startup_and_reading_s"] == pytest.approx(1.8)
    assert b["budget_per_session_s"] == pytest.approx(0.030)
    assert b["times_over_budget"] == pytest.approx(0.079 / 0.030)


def test_budget_with_nothing_left(floor):
    # start-up alone over the allowed time: there is no budget, and no ratio to it
    b = floor.budget(12, 0.4, startup=1.8, read_two=0.2, per_session_rest_s=0.079)
    assert b["budget_per_session_s"] < 0
    assert b["times_over_budget"] is None


@pytest.fixture(scope="module")
def tiny_study(tmp_path_factory):
    study = tmp_path_factory.mktemp("floor") / "study"
    subprocess.run([str(BIN / "screenweave"), "synth", str(study),
                    "--participants-per-cohort", "1", "--sessions", "2", "--hours", "0.2",
                    "--seed", "3", "--force"], check=True, stdout=subprocess.DEVNULL)
    return study


def test_session_work_times_the_sessions_and_their_reading(floor, tiny_study):
    each, reads = floor.session_work(tiny_study, sample=2)
    # 4 sessions sampled every second one: two timed after the one that warms up
    assert len(each) == len(reads) == 1
    # a session's tasks read its recording and do everything else besides
    assert all(w > r > 0 for w, r in zip(each, reads))


def test_read_in_two_reads_every_recording(floor, tiny_study):
    files = sorted((tiny_study / "signals").glob("*.parquet"))
    assert floor.read_in_two(tiny_study, files) > 0
    with pytest.raises(SystemExit, match="reading recordings failed"):
        floor.read_in_two(tiny_study, [tiny_study / "signals" / "missing.parquet"] * 2)
