"""Time budget per platform and per group on a hand-made timeline."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from metrics_timelines import build_timeline
from pipeline.config import DwellSettings, SwitchSettings
from pipeline.metrics.budget import group_budget, platform_budget, time_budget
from pipeline.metrics.switching import find_bouts

GROUPS = {"tv": "broadcast", "phone": "mobile", "laptop": "mobile", "magazine": "print"}

# second:   0          1          2          3             4     5     6            7
SPEC = "ttpp.?ll"
IN_VIEW = ["phone;tv", "phone;tv", "phone;tv", "laptop;phone", "tv", None, "laptop;tv", "laptop"]


def _setup(groups=GROUPS):
    tl = build_timeline(SPEC, in_view=IN_VIEW)
    bouts = find_bouts(tl, SwitchSettings(), DwellSettings())
    return tl, bouts, groups


def test_bouts_of_the_example():
    # tv 0-1 (starts at the session edge), phone 2-3 (observed), laptop 6-7 (after the
    # uncoded second 5 and up to the session end).
    _, bouts, _ = _setup()
    assert bouts[["platform", "start_s", "end_s", "censored"]].values.tolist() == [
        ["tv", 0, 2, True], ["phone", 2, 4, False], ["laptop", 6, 8, True]]


def test_platform_budget_by_hand():
    tl, bouts, groups = _setup()
    p = platform_budget(tl, bouts, groups).set_index("platform")
    assert list(p.index) == ["laptop", "magazine", "phone", "tv"]
    # in view: laptop 3,6,7 = 3; magazine never; phone 0,1,2,3 = 4; tv 0,1,2,4,6 = 5
    # (second 5 is uncoded and not counted).
    assert p["in_view_seconds"].tolist() == [3, 0, 4, 5]
    # attended: laptop 6,7; phone 2,3; tv 0,1.
    assert p["attended_seconds"].tolist() == [2, 0, 2, 2]
    assert p["bouts"].tolist() == [1, 0, 1, 1]
    assert p["censored_bouts"].tolist() == [1, 0, 0, 1]
    assert p["group"].tolist() == ["mobile", "print", "mobile", "broadcast"]
    # KM: phone has one observed 2-s bout, S(2) = 0 -> median 2; tv and laptop have
    # only a censored bout (S stays 1) and magazine none -> NaN.
    assert p.loc["phone", "dwell_median_s"] == 2
    assert np.isnan(p.loc[["laptop", "magazine", "tv"], "dwell_median_s"]).all()


def test_group_budget_counts_a_second_once():
    tl, bouts, groups = _setup()
    g = group_budget(tl, bouts, groups).set_index("group")
    assert list(g.index) == ["broadcast", "mobile", "print"]
    assert g["platforms"].tolist() == [1, 2, 1]
    # mobile in view at 0,1,2,3,6,7 = 6 seconds, although phone (4) + laptop (3) = 7:
    # second 3 has both and counts once.
    assert g["in_view_seconds"].tolist() == [5, 6, 0]
    assert g["attended_seconds"].tolist() == [2, 4, 0]
    assert g["bouts"].tolist() == [1, 2, 0]
    # mobile pools phone (2 s, observed) and laptop (2 s, censored): 2 at risk at t = 2,
    # 1 event -> S(2) = 1/2 <= 0.5 -> median 2 (Kaplan & Meier 1958 product limit).
    assert g.loc["mobile", "dwell_median_s"] == 2
    assert np.isnan(g.loc["broadcast", "dwell_median_s"])


def test_code_missing_from_vocabulary_is_ungrouped():
    tl, bouts, _ = _setup()
    groups = {"tv": "broadcast", "phone": "mobile"}
    p = platform_budget(tl, bouts, groups).set_index("platform")
    assert p.loc["laptop", "group"] == "ungrouped"
    g = group_budget(tl, bouts, groups).set_index("group")
    assert g.loc["ungrouped", "in_view_seconds"] == 3


def test_budget_of_an_uncoded_session_is_zero():
    tl = build_timeline("???")
    bouts = find_bouts(tl, SwitchSettings(), DwellSettings())
    p = platform_budget(tl, bouts, GROUPS)
    assert len(p) == 4 and (p[["in_view_seconds", "attended_seconds", "bouts"]] == 0).all().all()
    g = group_budget(tl, bouts, GROUPS)
    assert (g["in_view_seconds"] == 0).all()


def _random_timeline(seed: int, n: int = 300):
    """A timeline with random codes, a few uncoded seconds and some codes missing from
    the vocabulary (the budget counts distinct values; the reference counts seconds)."""
    rng = np.random.default_rng(seed)
    codes = ["tv", "phone", "laptop", "radio"]  # radio is not in GROUPS
    spec, in_view = [], []
    for _ in range(n):
        if rng.random() < 0.05:
            spec.append("?")
            in_view.append(None)
            continue
        shown = sorted(rng.choice(codes, size=int(rng.integers(0, 3)), replace=False))
        in_view.append(";".join(shown))
        spec.append(".")
    tl = build_timeline("".join(spec), in_view=in_view)
    # attended: one of the platforms in view, or nothing
    attended = [None if iv is None else (rng.choice(iv.split(";")) if iv and rng.random() < .8
                                         else "") for iv in in_view]
    tl["attended"] = pd.array(attended, dtype="string")
    return tl


def _budget_by_second(tl, groups):
    """Per-platform and per-group in-view and attended seconds, second by second."""
    platforms, grouped = {}, {}
    for coded, iv, att in zip(tl["coded"], tl["in_view"], tl["attended"]):
        if not coded:
            continue
        shown = [c for c in str(iv).split(";") if c] if not pd.isna(iv) else []
        for c in shown:
            platforms.setdefault(c, [0, 0])[0] += 1
        for g in {groups.get(c, "ungrouped") for c in shown}:
            grouped.setdefault(g, [0, 0])[0] += 1
        if not pd.isna(att) and att != "":
            platforms.setdefault(att, [0, 0])[1] += 1
            grouped.setdefault(groups.get(att, "ungrouped"), [0, 0])[1] += 1
    return platforms, grouped


@pytest.mark.parametrize("seed", range(4))
def test_budget_counts_match_a_second_by_second_count(seed):
    tl = _random_timeline(seed)
    bouts = find_bouts(tl, SwitchSettings(), DwellSettings())
    by_platform, by_group = _budget_by_second(tl, GROUPS)
    p = platform_budget(tl, bouts, GROUPS).set_index("platform")
    g = group_budget(tl, bouts, GROUPS).set_index("group")
    assert list(p.index) == sorted(set(GROUPS) | set(by_platform))
    for code, row in p.iterrows():
        assert [row["in_view_seconds"], row["attended_seconds"]] == by_platform.get(code, [0, 0])
        assert row["bouts"] == (bouts["platform"] == code).sum()
    for group, row in g.iterrows():
        assert [row["in_view_seconds"], row["attended_seconds"]] == by_group.get(group, [0, 0])
    # time_budget is both tables at once
    both = time_budget(tl, bouts, GROUPS)
    pd.testing.assert_frame_equal(both[0], platform_budget(tl, bouts, GROUPS))
    pd.testing.assert_frame_equal(both[1], group_budget(tl, bouts, GROUPS))
