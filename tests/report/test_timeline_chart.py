"""The timeline chart's lanes and its choice of session, on hand-made seconds."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.errors import ConfigError
from pipeline.report.charts.timeline import choose_session, lane_table, runs
from pipeline.report.palette import build_palette


def test_runs_find_each_stretch():
    start, end = runs(np.array([1, 1, 0, 0, 1, 0, 1, 1, 1], bool))
    assert start.tolist() == [0, 4, 6] and end.tolist() == [2, 5, 9]


def test_lanes_are_per_platform_shaded_in_view_solid_attended():
    # seconds 0-4 tv and phone in view, tv attended 0-2 then phone 3-4; 5-6 uncoded; 7 none
    tl = pd.DataFrame({
        "second": range(8),
        "coded": [True] * 5 + [False, False, True],
        "in_view": pd.array(["phone;tv"] * 5 + [None, None, ""], dtype="string"),
        "attended": pd.array(["tv"] * 3 + ["phone"] * 2 + [None, None, ""], dtype="string"),
    })
    pal = build_palette(["tv", "phone", "radio"], labels={"tv": "Television"})
    rects, lanes = lane_table(tl, pal)
    assert lanes == ["Television", "phone", "uncoded"]  # vocabulary order; radio never seen
    got = {(r.lane, r.kind): (r.start_min * 60, r.end_min * 60) for r in rects.itertuples()}
    assert got == {("Television", "in view"): (0, 5), ("Television", "attended"): (0, 3),
                   ("phone", "in view"): (0, 5), ("phone", "attended"): (3, 5),
                   ("uncoded", "uncoded"): (5, 7)}


def test_default_session_is_the_one_nearest_the_median_rate():
    s = pd.DataFrame({"participant_id": ["a", "a", "b", "c"], "session_id": ["1", "2", "1", "1"],
                      "switches_per_hour": [10.0, 50.0, 31.0, np.nan],
                      "multi_hours": [1.0, 1.0, 1.0, 3.0]})
    stems = {"a__1", "a__2", "b__1", "c__1"}
    pid, sid, why = choose_session(s, stems)
    assert (pid, sid) == ("b", "1") and "median" in why  # median of 10, 31, 50 is 31
    assert choose_session(s, stems, "a/2")[:2] == ("a", "2")
    with pytest.raises(ConfigError, match="no timeline"):
        choose_session(s, stems, "z/9")
