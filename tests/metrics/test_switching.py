"""Attention bouts and switches on hand-made timelines (definitions: CONTRACT §2)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from metrics_timelines import build_timeline
from pipeline.config import DwellSettings, SwitchSettings
from pipeline.errors import StageError
from pipeline.metrics.switching import BOUT_COLUMNS, SWITCH_COLUMNS, find_bouts, find_switches

DEFAULT = SwitchSettings()  # min_bout_s = 1, max_gap_s = 3
DWELL = DwellSettings()     # censor_at_invalid_signal = True


def _bouts(spec, cfg=DEFAULT, dwell=DWELL, **kw):
    tl = build_timeline(spec, **kw)
    return tl, find_bouts(tl, cfg, dwell)


def _rows(bouts):
    return [tuple(r) for r in bouts[["platform", "start_s", "end_s"]].itertuples(index=False)]


# ----------------------------------------------------------------------------- gaps
def test_gap_of_exactly_max_gap_is_a_switch():
    # tv 0-2, three empty seconds 3,4,5, phone 6-8: gap = 6 - 3 = 3 = max_gap_s.
    tl, b = _bouts("ttt...ppp")
    assert _rows(b) == [("tv", 0, 3), ("phone", 6, 9)]
    sw = find_switches(b, tl, DEFAULT)
    assert list(sw.columns) == list(SWITCH_COLUMNS)
    assert sw.to_dict("records") == [{
        "from_platform": "tv", "to_platform": "phone", "from_end_s": 3, "to_start_s": 6,
        "gap_s": 3, "second": 6}]


def test_gap_of_max_gap_plus_one_is_no_switch():
    # four empty seconds 3..6: gap = 7 - 3 = 4 > 3.
    tl, b = _bouts("ttt....ppp")
    assert _rows(b) == [("tv", 0, 3), ("phone", 7, 10)]
    assert len(find_switches(b, tl, DEFAULT)) == 0


def test_max_gap_setting_is_used():
    tl, b = _bouts("ttt....ppp")
    assert len(find_switches(b, tl, SwitchSettings(max_gap_s=4))) == 1
    tl, b = _bouts("ttt.ppp")
    assert len(find_switches(b, tl, SwitchSettings(max_gap_s=0))) == 0


def test_direct_switch_has_zero_gap():
    tl, b = _bouts(".ttpp.")
    sw = find_switches(b, tl, DEFAULT)
    assert sw[["from_platform", "to_platform", "gap_s", "second"]].values.tolist() == [
        ["tv", "phone", 0, 3]]


def test_uncoded_second_inside_a_gap_breaks_the_switch():
    # gap 3..5 is 3 seconds long (would be a switch) but second 4 is uncoded.
    tl, b = _bouts("ttt.?.ppp")
    assert _rows(b) == [("tv", 0, 3), ("phone", 6, 9)]
    assert len(find_switches(b, tl, DEFAULT)) == 0
    # Directly adjacent to the uncoded second: still no switch.
    tl, b = _bouts(".tt?pp.")
    assert len(find_switches(b, tl, DEFAULT)) == 0


def test_same_platform_after_a_gap_is_two_bouts_and_no_switch():
    tl, b = _bouts(".ttt..ttt.")
    assert _rows(b) == [("tv", 1, 4), ("tv", 6, 9)]
    assert b["merged_from"].tolist() == [1, 1]
    assert len(find_switches(b, tl, DEFAULT)) == 0


def test_several_switches_in_order():
    # tv 0-1, phone 2-3, . , tv 5, laptop 6-7: switches at 2 (gap 0), 5 (gap 1), 6 (gap 0)
    tl, b = _bouts("ttpp.tll")
    sw = find_switches(b, tl, DEFAULT)
    assert sw["second"].tolist() == [2, 5, 6]
    assert sw["gap_s"].tolist() == [0, 1, 0]
    assert list(zip(sw.from_platform, sw.to_platform)) == [
        ("tv", "phone"), ("phone", "tv"), ("tv", "laptop")]


# ------------------------------------------------------------------ drop and merge
def test_short_bout_is_dropped_and_neighbours_merge():
    # min_bout_s = 2: tv 1-3, phone 4 (1 s, dropped), tv 5-7 -> one tv bout 1..7
    # spanning the dropped second: duration 8 - 1 = 7, merged from 2 kept bouts.
    cfg = SwitchSettings(min_bout_s=2)
    tl, b = _bouts(".tttpttt.", cfg)
    assert _rows(b) == [("tv", 1, 8)]
    assert b["duration_s"].tolist() == [7]
    assert b["merged_from"].tolist() == [2]
    assert not b["censored"].any()  # neighbours 0 and 8 are coded, valid, inside
    assert len(find_switches(b, tl, cfg)) == 0
    # With the default min_bout_s = 1 the glance is a bout: 3 bouts, 2 switches.
    _, b1 = _bouts(".tttpttt.")
    assert _rows(b1) == [("tv", 1, 4), ("phone", 4, 5), ("tv", 5, 8)]
    assert len(find_switches(b1, tl, DEFAULT)) == 2


def test_merge_needs_a_dropped_bout_between():
    # Two 3-s tv bouts 2 empty seconds apart, nothing dropped between: stay apart.
    cfg = SwitchSettings(min_bout_s=2)
    _, b = _bouts(".ttt..ttt.", cfg)
    assert _rows(b) == [("tv", 1, 4), ("tv", 6, 9)]


def test_merge_counts_dropped_seconds_in_the_gap():
    # tv 1-3, empty 4-5, phone 6 (dropped), empty 7-8, tv 9-11: 9 - 4 = 5 seconds between.
    spec = ".ttt..p..ttt."
    _, b = _bouts(spec, SwitchSettings(min_bout_s=2, max_gap_s=3))
    assert _rows(b) == [("tv", 1, 4), ("tv", 9, 12)]          # 5 > 3: no merge
    _, b = _bouts(spec, SwitchSettings(min_bout_s=2, max_gap_s=5))
    assert _rows(b) == [("tv", 1, 12)]                        # 5 <= 5: merged
    assert b["duration_s"].tolist() == [11]


def test_merge_is_blocked_by_an_uncoded_second():
    # phone 4 is dropped but second 5 is uncoded: the tv bouts stay apart.
    _, b = _bouts(".tttp?ttt.", SwitchSettings(min_bout_s=2))
    assert _rows(b) == [("tv", 1, 4), ("tv", 6, 9)]
    # the first ends into the (coded, valid) phone glance: observed;
    # the second starts after the uncoded second 5: censored.
    assert b["censor_reason"].tolist() == ["", "uncoded"]


def test_merge_chains():
    # tv 0-1, phone 2 (dropped), tv 3-4, laptop 5 (dropped), tv 6-7 -> one bout 0..7.
    _, b = _bouts("ttpttltt", SwitchSettings(min_bout_s=2))
    assert _rows(b) == [("tv", 0, 8)]
    assert b["merged_from"].tolist() == [3]
    assert b["censor_reason"].tolist() == ["session_edge"]


def test_dropped_seconds_count_as_unattended_for_switches():
    # min_bout_s = 2: tv 1-3, phone 4 dropped, empty 5-6, laptop 7-8: gap 7 - 4 = 3.
    cfg = SwitchSettings(min_bout_s=2)
    tl, b = _bouts(".tttp..ll.", cfg)
    assert _rows(b) == [("tv", 1, 4), ("laptop", 7, 9)]
    sw = find_switches(b, tl, cfg)
    assert sw[["from_platform", "to_platform", "gap_s"]].values.tolist() == [["tv", "laptop", 3]]
    # one more empty second: gap 4 > 3, no switch.
    tl, b = _bouts(".tttp...ll.", cfg)
    assert len(find_switches(b, tl, cfg)) == 0


def test_only_short_bouts_gives_no_bouts():
    tl, b = _bouts(".t.p.l.", SwitchSettings(min_bout_s=2))
    assert len(b) == 0 and list(b.columns) == list(BOUT_COLUMNS)
    assert len(find_switches(b, tl, DEFAULT)) == 0


# ------------------------------------------------------------------------ censoring
def test_censoring_at_session_edges():
    _, b = _bouts("tt.pp.ll")
    assert b["censor_reason"].tolist() == ["session_edge", "", "session_edge"]
    assert b["censored"].tolist() == [True, False, True]


def test_censoring_at_uncoded_gap():
    # tv 1-3 ends at uncoded 4; phone 5-6 starts after it.
    _, b = _bouts(".ttt?pp.")
    assert b["censor_reason"].tolist() == ["uncoded", "uncoded"]


def test_censoring_at_invalid_signal():
    # second 5 has invalid signal: the tv bout 2-4 ends into it; phone 7-8 is clear.
    _, b = _bouts("..ttt..pp..", valid="11111011111")
    assert b["censor_reason"].tolist() == ["invalid_signal", ""]
    _, b = _bouts("..ttt..pp..", dwell=DwellSettings(censor_at_invalid_signal=False),
                  valid="11111011111")
    assert b["censor_reason"].tolist() == ["", ""]


def test_invalid_signal_inside_a_bout_does_not_censor_it():
    _, b = _bouts(".ttt.", valid="11011")
    assert b["censored"].tolist() == [False]


def test_censor_reason_priority():
    # edge before, invalid after -> session_edge
    _, b = _bouts("ttt.", valid="1110")
    assert b["censor_reason"].tolist() == ["session_edge"]
    # uncoded before, invalid after -> uncoded
    _, b = _bouts("?ttt.", valid="11110")
    assert b["censor_reason"].tolist() == ["uncoded"]


def test_empty_and_uncoded_sessions():
    for spec in ("", "....", "???"):
        tl, b = _bouts(spec)
        assert len(b) == 0
        assert len(find_switches(b, tl, DEFAULT)) == 0


def test_bout_dtypes():
    _, b = _bouts("tt.pp")
    assert list(b.columns) == list(BOUT_COLUMNS)
    for col in ("start_s", "end_s", "duration_s", "merged_from"):
        assert b[col].dtype == np.int64
    assert b["censored"].dtype == bool


def test_seconds_out_of_order_is_a_stage_error():
    tl = build_timeline("tt.pp").iloc[[0, 2, 1, 3, 4]]
    with pytest.raises(StageError, match="0..n-1"):
        find_bouts(tl, DEFAULT, DWELL)


# ------------------------------------------- against a plain loop over the definitions
def _reference(spec, valid, min_bout, max_gap, censor_invalid):
    """Second-by-second reading of CONTRACT §2 and the merge rule, as a plain loop."""
    n = len(spec)
    raw, i = [], 0
    while i < n:
        j = i
        while j < n and spec[j] == spec[i]:
            j += 1
        if spec[i] not in ".?":
            raw.append((spec[i], i, j))
        i = j
    kept = [r for r in raw if r[2] - r[1] >= min_bout]
    dropped_starts = [r[1] for r in raw if r[2] - r[1] < min_bout]
    merged = []
    for c, s, e in kept:
        if merged:
            pc, ps, pe, k = merged[-1]
            between = spec[pe:s]
            if (pc == c and "?" not in between and len(between) <= max_gap
                    and any(pe <= d < s for d in dropped_starts)):
                merged[-1] = (pc, ps, e, k + 1)
                continue
        merged.append((c, s, e, 1))
    bouts = []
    for c, s, e, k in merged:
        sides = [s - 1, e]
        if any(x < 0 or x >= n for x in sides):
            reason = "session_edge"
        elif any(spec[x] == "?" for x in sides):
            reason = "uncoded"
        elif censor_invalid and any(valid[x] == "0" for x in sides):
            reason = "invalid_signal"
        else:
            reason = ""
        bouts.append((c, s, e, e - s, reason, k))
    switches = []
    for a, b in zip(bouts, bouts[1:]):
        between = spec[a[2]:b[1]]
        if a[0] != b[0] and len(between) <= max_gap and "?" not in between:
            switches.append((a[0], b[0], a[2], b[1]))
    return bouts, switches


@settings(max_examples=100, deadline=None)
@given(
    spec=st.text(alphabet="tp.?", min_size=0, max_size=40),
    valid_bits=st.lists(st.booleans(), min_size=40, max_size=40),
    min_bout=st.integers(1, 3),
    max_gap=st.integers(0, 4),
    censor_invalid=st.booleans(),
)
def test_matches_a_plain_loop_reading_of_the_definitions(spec, valid_bits, min_bout, max_gap,
                                                         censor_invalid):
    valid = "".join("1" if v else "0" for v in valid_bits[: len(spec)])
    cfg = SwitchSettings(min_bout_s=min_bout, max_gap_s=max_gap)
    tl = build_timeline(spec, valid=valid)
    b = find_bouts(tl, cfg, DwellSettings(censor_at_invalid_signal=censor_invalid))
    sw = find_switches(b, tl, cfg)
    exp_bouts, exp_switches = _reference(spec, valid, min_bout, max_gap, censor_invalid)
    letter = {"tv": "t", "phone": "p"}
    got = [(letter[p], s, e, d, r, k) for p, s, e, d, r, k in
           b[["platform", "start_s", "end_s", "duration_s", "censor_reason",
              "merged_from"]].itertuples(index=False)]
    assert got == exp_bouts
    got_sw = [(letter[a], letter[c], e, s) for a, c, e, s in
              sw[["from_platform", "to_platform", "from_end_s", "to_start_s"]]
              .itertuples(index=False)]
    assert got_sw == exp_switches
