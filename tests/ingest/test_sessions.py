"""sessions.csv rules (CONTRACT §1): roster membership, unique IDs, ISO 8601 times."""

from __future__ import annotations

from datetime import datetime, timezone
from zoneinfo import ZoneInfo

import pandas as pd
import pytest

from ingest_builders import TOML, assert_names, load, refusal, write_study

HEADER = "participant_id,session_id,start,end\n"


def _sessions(*rows: str) -> str:
    return HEADER + "\n".join(rows) + "\n"


def _study(tmp_path, *rows, toml=TOML, media_log=None):
    kw = {} if media_log is None else {"media_log": media_log}
    return write_study(tmp_path, sessions=_sessions(*rows), toml=toml, sync=None, **kw)


def test_participant_not_in_roster_is_refused(tmp_path):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p09,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "participant_id", "p09",
                 says="not a participant of roster.csv")


def test_duplicate_session_within_participant_is_refused(tmp_path):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p02,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p01,s1,2026-03-02T19:00:00Z,2026-03-02T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 4, "session_id", "s1", says="of line 2")


def test_same_session_id_for_two_participants_is_fine(tmp_path):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p02,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z")
    assert len(load(tmp_path).sessions) == 2


@pytest.mark.parametrize("bad", ["s 1", "s1/../x", ""])
def test_session_id_outside_the_id_rule_is_refused(tmp_path, bad):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           f"p02,{bad},2026-03-01T19:00:00Z,2026-03-01T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "session_id", bad)


@pytest.mark.parametrize("bad", ["yesterday", "2026-03-01", "01/03/2026 19:00",
                                 "2026-13-01T19:00:00", "2026-03-01T25:00:00"])
def test_start_not_iso8601_is_refused(tmp_path, bad):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           f"p02,s1,{bad},2026-03-01T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "start", bad,
                 says="not an ISO 8601 date-time")


@pytest.mark.parametrize("bad", ["9999-12-31T23:59:59Z", "1066-10-14 09:00"])
def test_date_outside_the_handled_years_is_refused_as_such(tmp_path, bad):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           f"p02,s1,{bad},2026-03-01T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "start", bad,
                 says="outside the years screenweave handles (1678 to 2261)")


def test_offset_aware_times_are_read_as_given():
    from pipeline.ingest.sessions import parse_times

    text = pd.Series(["2026-03-01T19:30:00+01:00", "2026-03-01T19:30:00Z",
                      "2026-03-01T19:30:00-05:30", "2026-03-01T19:30:00+0100",
                      "2026-03-01 19:30+01"])
    parsed, reason, naive = parse_times(text, "Asia/Tokyo")  # zone unused for offset times
    # reference: the standard library's ISO 8601 reader (datetime.fromisoformat)
    expected = [datetime.fromisoformat(v).astimezone(timezone.utc)
                for v in ["2026-03-01T19:30:00+01:00", "2026-03-01T19:30:00+00:00",
                          "2026-03-01T19:30:00-05:30", "2026-03-01T19:30:00+01:00",
                          "2026-03-01T19:30:00+01:00"]]
    assert [t.to_pydatetime() for t in parsed] == expected
    assert (reason == "").all() and not naive.any()


def test_naive_times_are_read_in_the_study_zone(tmp_path):
    _study(tmp_path, "p01,s1,2026-07-01 20:00:00,2026-07-01 20:00:20",
           "p02,s1,2026-01-15T20:00:00,2026-01-15T20:00:20.9")
    sessions = load(tmp_path).sessions
    berlin = ZoneInfo("Europe/Berlin")  # IANA tz database: CEST (+02) in July, CET (+01) in January
    assert sessions["start"].iloc[0] == pd.Timestamp(
        datetime(2026, 7, 1, 20, tzinfo=berlin)).tz_convert("UTC")
    assert sessions["start"].iloc[1] == pd.Timestamp("2026-01-15T19:00:00Z")
    assert str(sessions["start"].dt.tz) == "UTC"
    # duration_s is the whole seconds from start to end, rounded down
    assert sessions["duration_s"].tolist() == [20, 20]


def test_naive_time_that_does_not_exist_in_the_zone_is_refused(tmp_path):
    # IANA tz database (Europe/Berlin, EU rule): on 2026-03-29 clocks jump from 02:00 to
    # 03:00 CEST, so 02:30 never happens. Cross-checked with zoneinfo below.
    z = ZoneInfo("Europe/Berlin")
    wall = datetime(2026, 3, 29, 2, 30, tzinfo=z)
    assert wall.astimezone(timezone.utc).astimezone(z).replace(tzinfo=None) != wall.replace(
        tzinfo=None)
    _study(tmp_path, "p01,s1,2026-03-28 19:00:00,2026-03-28 19:00:20",
           "p02,s1,2026-03-29 02:30:00,2026-03-29 03:30:20")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "start", "2026-03-29 02:30:00",
                 says="does not exist in time zone 'Europe/Berlin'")


def test_naive_time_that_happens_twice_in_the_zone_is_refused(tmp_path):
    # IANA tz database (Europe/Berlin, EU rule): on 2026-10-25 clocks go back from 03:00
    # CEST to 02:00 CET, so 02:30 happens twice (fold 0 at +02:00, fold 1 at +01:00).
    z = ZoneInfo("Europe/Berlin")
    wall = datetime(2026, 10, 25, 2, 30, tzinfo=z)
    assert wall.utcoffset() != wall.replace(fold=1).utcoffset()
    _study(tmp_path, "p01,s1,2026-10-25 01:00:00,2026-10-25T02:30:00",
           "p02,s1,2026-10-25 04:00:00,2026-10-25 04:00:20")
    assert_names(refusal(tmp_path), "sessions.csv", 2, "end", "2026-10-25T02:30:00",
                 says="happens twice in time zone 'Europe/Berlin'")


def test_dst_time_with_offset_is_fine(tmp_path):
    _study(tmp_path, "p01,s1,2026-10-25T02:30:00+01:00,2026-10-25T02:30:20+01:00",
           "p02,s1,2026-10-25T02:30:00+02:00,2026-10-25T02:30:20+02:00")
    start = load(tmp_path).sessions["start"]
    assert (start.iloc[0] - start.iloc[1]) == pd.Timedelta(hours=1)


@pytest.mark.parametrize("end", ["2026-03-01T19:00:00Z", "2026-03-01T18:59:00Z"])
def test_end_not_after_start_is_refused(tmp_path, end):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           f"p02,s1,2026-03-01T19:00:00Z,{end}")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "end", end, says="not after start")


def test_naive_times_in_default_utc_are_warned_about(tmp_path):
    write_study(tmp_path, toml=None)
    warnings = load(tmp_path).warnings
    assert any("read as UTC" in w for w in warnings)


def test_session_longer_than_max_session_hours_is_refused(tmp_path):
    # a year typed wrong: 2027 for 2026 makes the session a year long
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p02,s1,2026-03-01T19:00:00Z,2027-03-01T19:00:20Z")
    assert_names(refusal(tmp_path), "sessions.csv", 3, "end", "2027-03-01T19:00:20Z",
                 says="more than [study] max_session_hours = 168")


def test_session_over_a_day_is_a_warning(tmp_path):
    _study(tmp_path, "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z",
           "p02,s1,2026-03-01T19:00:00Z,2026-03-03T19:00:20Z")
    warnings = load(tmp_path).warnings
    assert any("p02/s1 lasts 48.0 hours" in w for w in warnings)


def test_extra_columns_are_kept_but_duration_is_always_computed(tmp_path):
    write_study(tmp_path, sessions="participant_id,session_id,start,end,duration_s,room\n"
                "p01,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z,999,den\n"
                "p02,s1,2026-03-01T19:00:00Z,2026-03-01T19:00:20Z,,\n")
    study = load(tmp_path)
    assert study.sessions["duration_s"].tolist() == [20, 20]
    assert study.sessions["room"].iloc[0] == "den" and study.sessions["room"].isna().iloc[1]
    assert any("duration_s is computed" in w for w in study.warnings)
