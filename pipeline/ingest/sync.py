"""sync.csv (optional): sync events seen on both clocks (CONTRACT §1).

One row per event: participant_id, session_id, video_s (video clock), sensor_s (sensor
clock), both finite numbers of seconds. The session must be in sessions.csv. A file
with a header and no rows means no sync events.
"""

from __future__ import annotations

import pandas as pd

from pipeline.errors import ProblemCollector
from pipeline.ingest.cells import finite_numbers
from pipeline.ingest.csvfile import CsvTable
from pipeline.ingest.sessions import session_rows

REQUIRED = ["participant_id", "session_id", "video_s", "sensor_s"]
COLUMNS = REQUIRED


def empty_sync() -> pd.DataFrame:
    return pd.DataFrame({"participant_id": pd.Series(dtype=object),
                         "session_id": pd.Series(dtype=object),
                         "video_s": pd.Series(dtype=float), "sensor_s": pd.Series(dtype=float)})


def validate_sync(table: CsvTable, sessions: pd.DataFrame,
                  problems: ProblemCollector) -> pd.DataFrame:
    """Check sync.csv; return participant_id, session_id, video_s, sensor_s."""
    ok = session_rows(table, sessions, problems, "sync") >= 0
    video, good_v = finite_numbers(table, "video_s", problems, "the event's time on the "
                                   "video clock", hint="seconds, e.g. 12.4")
    sensor, good_s = finite_numbers(table, "sensor_s", problems, "the event's time on the "
                                    "sensor clock", hint="seconds, e.g. 15.9")
    ok &= good_v & good_s
    out = pd.DataFrame({"participant_id": table.frame["participant_id"],
                        "session_id": table.frame["session_id"],
                        "video_s": video, "sensor_s": sensor})
    out = out[ok].reset_index(drop=True)
    out["participant_id"] = out["participant_id"].astype(object)
    out["session_id"] = out["session_id"].astype(object)
    return out
