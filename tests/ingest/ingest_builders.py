"""Tiny study folders for the ingest and `check` tests (invented data, no real people).

``write_study(tmp_path)`` writes a valid study: two participants in two cohorts, one
20-second session each, a second-by-second media log, sync events, a survey and one
Parquet recording per session. Every file can be replaced by passing its text.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd

ROSTER = """participant_id,cohort,birth_year,household_id
p01,alpha,1990,h1
p02,beta,1985,h2
"""

SESSIONS = """participant_id,session_id,start,end
p01,s1,2026-03-01T19:00:00+01:00,2026-03-01T19:00:20+01:00
p02,s1,2026-03-02 20:00:00,2026-03-02 20:00:20
"""

SYNC = """participant_id,session_id,video_s,sensor_s
p01,s1,1.0,3.5
p01,s1,15.0,17.5
p02,s1,2.0,2.0
"""

SURVEY = """participant_id,item,value
p01,enjoyment,5
p02,enjoyment,3
p01,fatigue,2
"""

TOML = """[study]
name = "Tiny invented study"
timezone = "Europe/Berlin"

[platforms.groups]
tv = "screen"
phone = "screen"
magazine = "print"
"""


def second_log(seconds: int = 20, coder: str | None = None) -> str:
    """A second-by-second log of both sessions: tv, then tv and phone, then nothing."""
    header = "participant_id,session_id,second,in_view,attended"
    if coder is not None:
        header += ",coder"
    rows = [header]
    for pid in ("p01", "p02"):
        for s in range(seconds):
            if s < 8:
                view, att = "tv", "tv"
            elif s < 15:
                view, att = "phone;tv", "phone" if s % 2 else "tv"
            else:
                view, att = "", ""
            row = f"{pid},s1,{s},{view},{att}"
            if coder is not None:
                row += f",{coder}"
            rows.append(row)
    return "\n".join(rows) + "\n"


MEDIA_LOG = second_log()


def write_recording(path: Path, seconds: float = 25.0, rate_hz: float = 4.0) -> None:
    t = np.arange(0, seconds, 1 / rate_hz)
    pd.DataFrame({"time_s": t, "eda_us": 5 + 0.1 * np.sin(t),
                  "hr_bpm": np.full(len(t), 70.0)}).to_parquet(path, index=False)


def write_study(root: Path, *, roster: str | None = ROSTER, sessions: str | None = SESSIONS,
                media_log: str | None = MEDIA_LOG, media_log_files: dict[str, str] | None = None,
                sync: str | None = SYNC, survey: str | None = SURVEY, toml: str | None = TOML,
                signals: bool = True, encoding: str = "utf-8") -> Path:
    """Write a study folder under ``root``; ``None`` leaves a file out."""
    root.mkdir(parents=True, exist_ok=True)
    texts = {"roster.csv": roster, "sessions.csv": sessions, "sync.csv": sync,
             "survey.csv": survey}
    if media_log_files is None:
        texts["media_log.csv"] = media_log
    else:
        (root / "media_log").mkdir()
        for name, text in media_log_files.items():
            texts[f"media_log/{name}"] = text
    for name, text in texts.items():
        if text is not None:
            (root / name).write_bytes(text.encode(encoding))
    if toml is not None:
        (root / "study.toml").write_text(toml, encoding="utf-8")
    if signals:
        (root / "signals").mkdir()
        for pid in ("p01", "p02"):
            write_recording(root / "signals" / f"{pid}__s1.parquet")
    return root


def tree_hashes(root: Path) -> dict[str, str]:
    """sha256 of every file under ``root``, by relative path."""
    return {p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def load(root: Path):
    """resolve_study + load_study, as the commands do."""
    from pipeline.config import resolve_study
    from pipeline.ingest import load_study

    folder, cfg, _ = resolve_study(root)
    return load_study(folder, cfg)


def refusal(root: Path):
    """The InputError load_study raises for the study at ``root``."""
    import pytest

    from pipeline.errors import InputError

    with pytest.raises(InputError) as info:
        load(root)
    return info.value


def assert_names(err, file: str, line: int | None, column: str | None, value, *,
                 says: str | None = None) -> None:
    """One problem of ``err`` names this file, line, column and value, in its message too."""
    where = file + (f", line {line}" if line is not None else "")
    where += f", column {column!r}" if column is not None else ""
    text = err.render()
    matching = [p for p in err.problems
                if p.file == file and p.line == line and p.column == column
                and (value is None or str(p.value) == str(value))]
    assert matching, f"no problem at {where} with value {value!r} in:\n{text}"
    rendered = [p.render() for p in matching]
    assert any(r.startswith(where + ": ") for r in rendered), rendered
    if value is not None:
        from pipeline.errors import _short

        assert any(f"value {_short(value)!r}" in r for r in rendered), rendered
    if says is not None:
        assert any(says in r for r in rendered), f"{says!r} not in {rendered}"
    assert all(r in text for r in rendered[:1])
