"""benchmarks/scaling.py: the helpers the scaling figures rest on (the runs themselves
are measured by the script, never timed in tests)."""

from __future__ import annotations

import csv
import importlib.util
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "ingest"))
from ingest_builders import write_study  # noqa: E402

_spec = importlib.util.spec_from_file_location("scaling", ROOT / "benchmarks" / "scaling.py")
scaling = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(scaling)

ROSTER = """participant_id,cohort,birth_year,household_id
p01,alpha,1990,h1
p02,beta,1985,h2
p03,alpha,1991,h3
p04,beta,1986,h4
p05,alpha,1992,h5
p06,beta,1987,h6
"""


def _rows(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_split_study_halves_the_participants_and_keeps_both_cohorts(tmp_path):
    study = write_study(tmp_path / "study", roster=ROSTER)
    halves = (tmp_path / "a", tmp_path / "b")
    sessions = scaling.split_study(study, halves)
    rosters = [{r["participant_id"]: r["cohort"] for r in _rows(h / "roster.csv")}
               for h in halves]
    # every second participant down the roster sorted by cohort: alpha p01 p03 p05,
    # then beta p02 p04 p06
    assert rosters == [{"p01": "alpha", "p05": "alpha", "p04": "beta"},
                       {"p03": "alpha", "p02": "beta", "p06": "beta"}]
    for name in ("sessions.csv", "sync.csv", "media_log.csv", "survey.csv"):
        whole = _rows(study / name)
        parts = [_rows(h / name) for h in halves]
        assert sorted(map(str, parts[0] + parts[1])) == sorted(map(str, whole)), name
        for part, roster in zip(parts, rosters):
            assert {r["participant_id"] for r in part} <= set(roster), name
    assert sessions == [1, 1]  # p01's and p02's sessions
    assert [sorted(p.name for p in (h / "signals").iterdir()) for h in halves] == [
        ["p01__s1.parquet"], ["p02__s1.parquet"]]
    for h in halves:
        assert (h / "study.toml").read_bytes() == (study / "study.toml").read_bytes()


def test_split_study_refuses_a_layout_it_does_not_handle(tmp_path):
    study = write_study(tmp_path / "study", media_log_files={"p01.csv": "x\n"})
    with pytest.raises(SystemExit, match="media_log"):
        scaling.split_study(study, (tmp_path / "a", tmp_path / "b"))


def test_fit_lines_recovers_exact_lines_and_the_size_for_the_target():
    # 1 worker: 3 s + 0.10 s per session; 2 workers: 3 s + 0.05 s per session.
    # Speedup 1.7 where (3 + 0.1 n) = 1.7 (3 + 0.05 n), i.e. n = 2.1 / 0.015 = 140.
    rows = [{"sessions": n, "wall_s_workers1": 3 + 0.10 * n,
             "wall_s_workers2": 3 + 0.05 * n} for n in (12, 40, 120)]
    fit = scaling.fit_lines(rows)
    assert fit["fixed_s_workers1"] == pytest.approx(3.0)
    assert fit["per_session_s_workers2"] == pytest.approx(0.05)
    assert fit["sessions_for_target_speedup"] == pytest.approx(140.0)
    # per-session work that 2 workers do not speed up 1.7x: no study size reaches it
    slow = [dict(r, wall_s_workers2=3 + 0.07 * r["sessions"]) for r in rows]
    assert scaling.fit_lines(slow)["sessions_for_target_speedup"] is None


def test_peak_memory_sees_what_the_command_holds():
    # a child that holds a 200 MB buffer for half a second, sampled every 50 ms
    held = "b = bytearray(200 * 2**20); import time; time.sleep(0.5)"
    mem = scaling.peak_memory([sys.executable, "-c", held])
    assert mem["peak_rss_mb"] >= 200
    assert mem["peak_pss_mb"] >= 150  # sampled every 250 ms: at least one sample
    assert mem["wall_s"] >= 0.5


def test_wall_time_reports_a_failed_command_with_its_message():
    fails = [sys.executable, "-c", "import sys; sys.exit('no study here')"]
    ok = [sys.executable, "-c", "pass"]
    with pytest.raises(SystemExit, match=r"command failed \(1\).*no study here"):
        scaling.wall_time([ok, fails])

