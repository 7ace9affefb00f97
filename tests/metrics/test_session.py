"""Session metrics assembled from a hand-made timeline (CONTRACT §2, §3)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from metrics_timelines import build_timeline
from pipeline.config import ArousalSettings, Config, SwitchSettings
from pipeline.errors import StageError
from pipeline.metrics.arousal import FLAG_NOT_STANDARDISED
from pipeline.metrics.session import FLAG_MULTI_TIME_BELOW_MINIMUM, session_metrics
from pipeline.types import SessionInputs, SessionKey

GROUPS = {"tv": "broadcast", "phone": "mobile"}

# seconds 0-9 multi (phone + tv in view), 10-13 single tv, 14-15 none, 16 uncoded,
# 17-18 single tv.
SPEC = "ttpptt..pp" + "tttt" + ".." + "?" + "tt"
IN_VIEW = ["phone;tv"] * 10 + ["tv"] * 4 + ["", ""] + [None] + ["tv", "tv"]
VALID = "1" * 14 + "0" + "1" + "0" + "11"   # 14 and 16 invalid


def _inputs(n, cohort="evening", recording=Path("p01__s1.parquet")):
    # the metrics never open the recording; its presence only matters for censoring
    return SessionInputs(key=SessionKey("p01", "s1"), cohort=cohort, duration_s=n,
                         codes=pd.DataFrame(), coder="coder_a",
                         sync_pairs=np.empty((0, 2)), recording_path=recording,
                         platform_groups=GROUPS)


def _run(cfg, **kw):
    tl = build_timeline(SPEC, in_view=IN_VIEW, valid=VALID, **kw)
    return tl, session_metrics(tl, _inputs(len(SPEC)), cfg)


def test_switches_per_hour_arithmetic():
    cfg = Config(switching=SwitchSettings(min_multi_minutes=0.1))  # 6 s of multi needed
    _, m = _run(cfg)
    s = m.session
    # bouts: tv 0-1, phone 2-3, tv 4-5, phone 8-9 (gap 2), tv 10-13, tv 17-18.
    # switches at 2, 4, 8, 10; the last tv bout follows tv (and an uncoded second).
    assert m.switches["second"].tolist() == [2, 4, 8, 10]
    assert s["switches"] == 4
    assert s["multi_seconds"] == 10
    assert s["multi_hours"] == pytest.approx(10 / 3600)
    # 4 switches / (10 / 3600 h) = 1440 per hour
    assert s["switches_per_hour"] == pytest.approx(1440.0)
    assert s["enough_multi_time"] and FLAG_MULTI_TIME_BELOW_MINIMUM not in m.flags
    # coded: 19 seconds less the uncoded one = 18; media (>= 1 in view): 10 + 4 + 2 = 16
    assert (s["coded_seconds"], s["media_seconds"]) == (18, 16)
    assert s["coded_hours"] == pytest.approx(18 / 3600)
    assert s["media_hours"] == pytest.approx(16 / 3600)
    assert s["coded_fraction"] == pytest.approx(18 / 19)
    # valid signal on 17 of the 18 coded seconds (second 14 invalid; 16 is uncoded)
    assert s["eda_valid_fraction"] == pytest.approx(17 / 18)


def test_multi_time_below_minimum_gives_nan_rate_and_flag():
    _, m = _run(Config())  # default 5 minutes; this session has 10 s of multi
    assert np.isnan(m.session["switches_per_hour"])
    assert m.session["switches"] == 4  # the count is still reported
    assert not m.session["enough_multi_time"]
    assert FLAG_MULTI_TIME_BELOW_MINIMUM in m.flags
    assert FLAG_MULTI_TIME_BELOW_MINIMUM in m.session["flags"].split(";")


def test_no_multi_time_at_all_gives_nan_rate_even_with_zero_minimum():
    tl = build_timeline("ttpp")
    m = session_metrics(tl, _inputs(4), Config(switching=SwitchSettings(min_multi_minutes=0)))
    assert np.isnan(m.session["switches_per_hour"]) and m.session["switches"] == 1
    assert FLAG_MULTI_TIME_BELOW_MINIMUM in m.flags


def test_bouts_and_dwell_of_the_session():
    _, m = _run(Config())
    b = m.bouts
    assert b["censor_reason"].tolist() == ["session_edge", "", "", "", "invalid_signal",
                                           "session_edge"]
    assert m.session["bouts"] == 6 and m.session["censored_bouts"] == 3
    # durations 2+ 2 2 2 4+ 2+: at t = 2, 6 at risk and 3 ends -> S(2) = 1/2 -> median 2
    # (Kaplan & Meier 1958).
    assert m.session["dwell_median_s"] == 2
    assert b["group"].tolist() == ["broadcast", "mobile", "broadcast", "mobile",
                                   "broadcast", "broadcast"]


def test_tables_start_with_the_session_key_and_cohort():
    _, m = _run(Config())
    for table in (m.states, m.platforms, m.groups, m.bouts, m.switches):
        assert list(table.columns[:3]) == ["participant_id", "session_id", "cohort"]
        assert (table["cohort"] == "evening").all() and (table["session_id"] == "s1").all()
    assert m.states["state"].tolist() == ["none", "single", "multi"]
    assert m.platforms["platform"].tolist() == ["phone", "tv"]
    assert m.groups["group"].tolist() == ["broadcast", "mobile"]
    for col in ("participant_id", "session_id", "cohort", "coder", "coded_hours",
                "media_hours", "multi_hours", "switches", "switches_per_hour",
                "eda_valid_fraction", "compression_ratio", "bouts", "dwell_median_s"):
        assert col in m.session


def test_compression_ratio_reaches_the_session_row():
    # multi arousal 0..9 (range p95 - p05 = 8.55 - 0.45 = 8.1 by numpy's linear rule),
    # single and none seconds: 0 and 2 alternating (p05 0, p95 2, range 2).
    arousal = np.r_[np.arange(10.0), [0, 2, 0, 2], [0, 2], [np.nan], [0, 2]]
    arousal[14] = np.nan  # invalid second
    cfg = Config(arousal=ArousalSettings(min_state_minutes=0.05))  # 3 s
    _, m = _run(cfg, arousal=arousal)
    single = np.percentile([0, 2, 0, 2, 0, 2], [5, 95])       # seconds 10-13, 17-18
    multi = np.percentile(np.arange(10.0), [5, 95])
    expected = (multi[1] - multi[0]) / (single[1] - single[0])
    assert m.session["compression_ratio"] == pytest.approx(expected)
    assert expected == pytest.approx(8.1 / 2)


def test_valid_signal_without_arousal_is_flagged():
    # e.g. a participant whose skin conductance never varied (sd 0): arousal all NaN
    _, m = _run(Config(), arousal=np.full(len(SPEC), np.nan))
    assert FLAG_NOT_STANDARDISED in m.flags


def test_inputs_are_not_changed_and_errors_are_typed():
    tl = build_timeline(SPEC, in_view=IN_VIEW, valid=VALID)
    before = tl.copy()
    session_metrics(tl, _inputs(len(SPEC)), Config())
    pd.testing.assert_frame_equal(tl, before)
    with pytest.raises(StageError, match="arousal"):
        session_metrics(tl.drop(columns="arousal"), _inputs(len(SPEC)), Config())
    with pytest.raises(StageError, match="rows"):
        session_metrics(tl, _inputs(len(SPEC) + 5), Config())


def test_session_without_recording_censors_only_at_edges_and_gaps():
    # With no recording every second is "invalid", but that is absence of a sensor,
    # not an artifact: bouts are censored only at the session edges and uncoded gaps.
    # Bouts: tv 0-1 (edge), phone 2-3, tv 4-5, phone 8-9, tv 10-13, tv 17-18 (uncoded
    # second 16 before it, and the session end). Invalid-signal censoring would have
    # censored tv 10-13 (second 14 invalid); here it is observed.
    tl = build_timeline(SPEC, in_view=IN_VIEW, valid="0" * len(SPEC))
    m = session_metrics(tl, _inputs(len(SPEC), recording=None), Config())
    censored = m.bouts.set_index("start_s")["censored"].to_dict()
    assert censored == {0: True, 2: False, 4: False, 8: False, 10: False, 17: True}
