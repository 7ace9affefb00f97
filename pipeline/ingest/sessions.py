"""sessions.csv: one row per observation session (CONTRACT §1).

``start`` and ``end`` are ISO 8601 date-times. A value with a UTC offset (``Z``,
``+01:00``, ``-0530``, ``+01``) is read as given; a naive value is read in the
``[study] timezone``. A naive time that the zone skips (clocks go forward) or passes
twice (clocks go back) cannot be placed and is refused, naming the row.
``duration_s`` is the whole seconds from start to end (rounded down).
"""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd

from pipeline.config import StudySettings
from pipeline.errors import ProblemCollector
from pipeline.ingest.cells import duplicated_rows, pair_codes, report
from pipeline.ingest.csvfile import CsvTable
from pipeline.ingest.ids import check_ids

REQUIRED = ["participant_id", "session_id", "start", "end"]

#: Shape of an ISO 8601 date-time (date, 'T' or space, hh:mm[:ss[.f]], optional offset).
ISO_DATETIME = (r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?"
                r"(?P<offset>Z|z|[+-]\d{2}(?::?\d{2})?)?")
#: A session longer than this is probably a typo in a date; it is reported, not refused.
LONG_SESSION_S = 24 * 3600  # common practice: in-home sessions are one evening or day


def parse_times(text: pd.Series, timezone: str) -> tuple[pd.Series, np.ndarray, np.ndarray]:
    """Parse ISO 8601 date-times to UTC; naive ones are read in ``timezone``.

    Returns tz-aware UTC timestamps (NaT where not parsed), a reason per row ('' parsed,
    'format' not ISO 8601, 'range' outside the years pandas holds, 'nonexistent' or
    'ambiguous' in the zone) and a mask of the values that had no UTC offset.
    """
    parts = text.str.replace(",", ".", regex=False).str.extract(f"^(?P<all>{ISO_DATETIME})$")
    shaped = parts["all"].notna().to_numpy()
    aware = shaped & parts["offset"].notna().to_numpy()
    naive = shaped & ~aware
    values = text.str.replace(",", ".", regex=False)
    out = pd.Series(pd.NaT, index=text.index, dtype="datetime64[ns, UTC]")
    reason = np.where(shaped, "", "format").astype(object)
    if aware.any():
        parsed = pd.to_datetime(values[aware], format="ISO8601", utc=True, errors="coerce")
        out[aware] = parsed
    if naive.any():
        wall = pd.DatetimeIndex(pd.to_datetime(values[naive], format="ISO8601",
                                               errors="coerce"))
        strict = wall.tz_localize(timezone, nonexistent="NaT", ambiguous="NaT")
        as_dst = wall.tz_localize(timezone, nonexistent="NaT",
                                  ambiguous=np.ones(len(wall), dtype=bool))
        idx = np.flatnonzero(naive)
        r = np.full(len(wall), "", dtype=object)
        r[wall.isna()] = "format"
        r[~wall.isna() & as_dst.isna()] = "nonexistent"
        r[~wall.isna() & ~as_dst.isna() & strict.isna()] = "ambiguous"
        reason[idx] = r
        out.iloc[idx] = strict.tz_convert("UTC")
    reason[out.isna().to_numpy() & (reason == "")] = "format"
    for row in np.flatnonzero(shaped & (reason == "format")):
        try:  # a real date-time pandas cannot hold (before 1677 or after 2262)?
            datetime.fromisoformat(values.iloc[row])
        except ValueError:
            continue
        reason[row] = "range"
    return out, reason, naive


def _report_times(table: CsvTable, column: str, reason: np.ndarray, timezone: str,
                  problems: ProblemCollector) -> None:
    text = table.frame[column]
    empty = (text == "").to_numpy()
    report(table, column, empty, problems, f"is empty: every session needs its {column} time",
           hint="e.g. 2026-03-01T19:30:00+01:00")
    report(table, column, (reason == "format") & ~empty, problems,
           "is not an ISO 8601 date-time",
           hint=f"e.g. 2026-03-01T19:30:00+01:00, or 2026-03-01 19:30:00 read in "
           f"[study] timezone {timezone!r}")
    report(table, column, reason == "range", problems,
           f"is outside the years screenweave handles ({pd.Timestamp.min.year + 1} to "
           f"{pd.Timestamp.max.year - 1})", hint="check the year")
    report(table, column, reason == "nonexistent", problems,
           f"does not exist in time zone {timezone!r}: the clocks skip it (daylight-saving "
           "change)", hint="give the time with its UTC offset, e.g. +02:00")
    report(table, column, reason == "ambiguous", problems,
           f"happens twice in time zone {timezone!r}: the clocks pass it twice "
           "(daylight-saving change)",
           hint="give the time with its UTC offset (+02:00 before the change, +01:00 after)")


def validate_sessions(table: CsvTable, known_participants: set[str], cfg: StudySettings,
                      problems: ProblemCollector, warnings: list[str]) -> pd.DataFrame:
    """Check sessions.csv; return participant_id, session_id, start, end, duration_s.

    Extra columns are kept as text. Problems go to ``problems``; the returned frame
    holds the rows that passed.
    """
    frame = table.frame
    timezone = cfg.timezone
    ok = check_ids(table, "participant_id", problems, "participant ID")
    ok &= check_ids(table, "session_id", problems, "session ID")
    known = frame["participant_id"].isin(known_participants).to_numpy()
    report(table, "participant_id", ok & ~known, problems,
           "is not a participant of roster.csv",
           hint="add the participant to roster.csv or correct the ID")
    ok &= known
    ok &= duplicated_rows(table, ["participant_id", "session_id"], ok, problems, "session",
                          hint="session_id must be unique within a participant")
    start, start_reason, start_naive = parse_times(frame["start"], timezone)
    end, end_reason, end_naive = parse_times(frame["end"], timezone)
    _report_times(table, "start", start_reason, timezone, problems)
    _report_times(table, "end", end_reason, timezone, problems)
    timed = (start_reason == "") & (end_reason == "")
    backwards = timed & (end <= start).to_numpy()
    report(table, "end", backwards, problems,
           "is not after start: a session must end after it starts",
           hint="check the dates and the order of start and end")
    ok &= timed & ~backwards
    duration = ((end - start).dt.total_seconds().to_numpy())
    duration_s = np.where(ok, np.floor(np.nan_to_num(duration)), 0).astype(np.int64)
    short = ok & (duration_s < 1)
    report(table, "end", short, problems, "is less than one second after start",
           hint="a session lasts at least one second")
    ok &= ~short
    too_long = ok & (duration_s > cfg.max_session_hours * 3600)
    for row in np.flatnonzero(too_long):
        problems.add(table.label, f"makes the session {duration_s[row] / 3600:.1f} hours long, "
                     f"more than [study] max_session_hours = {cfg.max_session_hours:g}",
                     line=int(table.lines[row]), column="end", value=frame["end"].iloc[row],
                     hint="check the dates of start and end, or raise max_session_hours in "
                     "study.toml")
    ok &= ~too_long
    for row in np.flatnonzero(ok & (duration_s > LONG_SESSION_S)):
        warnings.append(f"{table.label}, line {int(table.lines[row])}: session "
                        f"{frame['participant_id'].iloc[row]}/{frame['session_id'].iloc[row]} "
                        f"lasts {duration_s[row] / 3600:.1f} hours; check start and end")
    out = pd.DataFrame({
        "participant_id": frame["participant_id"],
        "session_id": frame["session_id"],
        "start": start,
        "end": end,
        "duration_s": duration_s,
    })
    for name in frame.columns:
        if name == "duration_s":
            warnings.append(f"{table.label}: column duration_s is computed from start and end; "
                            "the file's values are not used")
        elif name not in REQUIRED:
            out[name] = frame[name].where(frame[name] != "", None)
    naive = int((start_naive & ok).sum() + (end_naive & ok).sum())
    if naive and timezone == "UTC":
        warnings.append(f"{table.label}: {naive} session time(s) have no UTC offset "
                        "and were read as UTC; set [study] timezone if they are local times")
    return out[ok].reset_index(drop=True)


def session_rows(table: CsvTable, sessions: pd.DataFrame, problems: ProblemCollector,
                 what: str) -> np.ndarray:
    """Position in ``sessions`` of each row's (participant_id, session_id), -1 if none.

    Rows naming no session of sessions.csv become problems (on participant_id when the
    participant has no session at all, else on session_id).
    """
    inverse, pairs = pair_codes(table.frame["participant_id"], table.frame["session_id"])
    where = {pair: i for i, pair in enumerate(
        zip(sessions["participant_id"], sessions["session_id"]))}
    pos = np.asarray([where.get(pair, -1) for pair in pairs], dtype=np.int32)
    pos = pos[inverse] if len(pos) else np.zeros(len(table), dtype=np.int32)
    missing = pos < 0
    known_p = table.frame["participant_id"].isin(set(sessions["participant_id"])).to_numpy()
    report(table, "participant_id", missing & ~known_p, problems,
           "has no session in sessions.csv",
           hint=f"every {what} row must belong to a session of sessions.csv")
    for row in np.flatnonzero(missing & known_p):
        problems.add(table.label, "is not a session of participant "
                     f"{table.frame['participant_id'].iloc[row]!r} in sessions.csv",
                     line=int(table.lines[row]), column="session_id",
                     value=table.frame["session_id"].iloc[row],
                     hint="add the session to sessions.csv or correct the ID")
    return pos
