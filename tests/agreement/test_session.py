"""One session's agreement rows on a hand-made session, numbers worked out below."""

from __future__ import annotations

import krippendorff
import numpy as np
import pandas as pd
import pytest

from pipeline.agreement.session import PAIR_COLUMNS, SessionAgreement, session_agreement
from pipeline.agreement.tables import agreement_tables
from pipeline.config import AgreementSettings, DwellSettings, SwitchSettings
from pipeline.errors import StageError
from pipeline.types import SessionKey

KEY = SessionKey("p01", "s1")
CODES = {"t": "tv", "p": "phone", ".": ""}
VIEW = {"m": "phone;tv", "t": "tv", "p": "phone", ".": ""}

# 20 seconds. One character per second; '?' = not coded by this coder.
#            second: 01234567890123456789
A_ATTENDED = "tttttppppp..ttttpptt"
A_IN_VIEW = "mmmmmmmmmm..ttttmmmm"
B_ATTENDED = "ttttpppppp.tttttpp??"
B_IN_VIEW = "mmmmmmmmmm.tttttpp??"


def rows(coder: str, attended: str, in_view: str) -> pd.DataFrame:
    keep = [i for i, c in enumerate(attended) if c != "?"]
    return pd.DataFrame({
        "second": keep,
        "in_view": [VIEW[in_view[i]] for i in keep],
        "attended": [CODES[attended[i]] for i in keep],
        "coder": coder,
    })


def two_coders() -> pd.DataFrame:
    return pd.concat([rows("bea", B_ATTENDED, B_IN_VIEW), rows("ann", A_ATTENDED, A_IN_VIEW)],
                     ignore_index=True)


def run(codes: pd.DataFrame, **agreement) -> SessionAgreement:
    return session_agreement(KEY, codes, 20, AgreementSettings(**agreement), SwitchSettings(),
                             DwellSettings())


def test_two_coder_session_row_worked_by_hand():
    res = run(two_coders())
    assert res.coders == ["ann", "bea"]
    (pair,) = res.pairs
    row = pair.row
    assert list(row) == list(PAIR_COLUMNS)
    # coder_a is the first in sorted order, whatever the row order of the log
    assert (row["coder_a"], row["coder_b"]) == ("ann", "bea")
    # bea did not code seconds 18-19: 18 seconds coded by both
    assert (row["seconds_a"], row["seconds_b"], row["seconds_compared"]) == (20, 18, 18)

    # Attended, seconds 0-17 (rows ann, columns bea; order none, phone, tv):
    #   none  [1, 0, 1]   (s10 both none; s11 ann none, bea tv)
    #   phone [0, 7, 0]   (s5-9, s16-17)
    #   tv    [0, 1, 8]   (s0-3 and s12-15 agree; s4 ann tv, bea phone)
    # p_o = 16/18; margins rows 2, 7, 9 and columns 1, 8, 9:
    # p_e = (2*1 + 7*8 + 9*9) / 18^2 = 139/324; kappa = (288 - 139)/(324 - 139) = 149/185.
    # Cohen (1960), "A coefficient of agreement for nominal scales".
    assert row["agreement_attended"] == pytest.approx(16 / 18)
    assert row["kappa_attended"] == pytest.approx(149 / 185)
    # 0.805 > 0.80: "almost perfect" (Landis & Koch 1977, Biometrics 33:159-174)
    assert row["kappa_attended_band"] == "almost perfect"

    # State, seconds 0-17 (order none, single, multi):
    #   ann none:   s10 none, s11 single        -> [1, 1, 0]
    #   ann single: s12-15 single               -> [0, 4, 0]
    #   ann multi:  s0-9 multi, s16-17 single   -> [0, 2, 10]
    # p_o = 15/18; margins rows 2, 4, 12, columns 1, 7, 10:
    # p_e = (2 + 28 + 120)/324 = 150/324; kappa = (270 - 150)/(324 - 150) = 120/174.
    assert row["agreement_state"] == pytest.approx(15 / 18)
    assert row["kappa_state"] == pytest.approx(120 / 174)
    assert row["kappa_state_band"] == "substantial"

    # Switches on seconds 0-17 only (s18-19 are uncoded for both):
    #   ann: tv->phone at 5, phone->tv at 12 (gap s10-11), tv->phone at 16
    #        (ann's phone->tv at 18 falls in seconds bea did not code: left out)
    #   bea: tv->phone at 4, phone->tv at 11 (gap s10), tv->phone at 16
    # tolerance 2: offsets -1, -1, 0, all three match.
    assert (row["switches_a"], row["switches_b"], row["switches_matched"]) == (3, 3, 3)
    assert row["switch_precision"] == row["switch_recall"] == row["switch_f1"] == 1.0
    assert pair.matches[["second_a", "second_b", "offset_s"]].values.tolist() == [
        [5, 4, -1], [12, 11, -1], [16, 16, 0]]

    # confusion.csv rows: every (platform_a, platform_b) cell, zeros included
    conf = pair.confusion.set_index(["platform_a", "platform_b"])["seconds"]
    assert conf[("tv", "phone")] == 1 and conf[("none", "tv")] == 1
    assert conf[("phone", "phone")] == 7 and conf[("phone", "tv")] == 0
    assert conf.sum() == 18 and len(conf) == 9


def test_tolerance_and_switch_settings_reach_the_matching():
    # tolerance 0: only the two tv->phone switches at second 16 coincide
    row = run(two_coders(), switch_tolerance_s=0).pairs[0].row
    assert row["switches_matched"] == 1
    assert row["switch_precision"] == pytest.approx(1 / 3)
    assert row["switch_recall"] == pytest.approx(1 / 3)
    # max_gap_s = 1 (the run's [switching]): ann's phone->tv across two empty seconds
    # is no longer a switch; bea's across one still is
    res = session_agreement(KEY, two_coders(), 20, AgreementSettings(),
                            SwitchSettings(max_gap_s=1), DwellSettings())
    row = res.pairs[0].row
    assert (row["switches_a"], row["switches_b"], row["switches_matched"]) == (2, 3, 2)
    assert row["switch_precision"] == pytest.approx(2 / 3)
    assert row["switch_recall"] == pytest.approx(1.0)
    assert row["switch_f1"] == pytest.approx(2 * 2 / 5)


def test_one_coder_gives_no_rows_and_out_of_range_seconds_are_refused():
    assert run(rows("ann", A_ATTENDED, A_IN_VIEW)).pairs == []
    bad = two_coders()
    bad.loc[0, "second"] = 25
    with pytest.raises(StageError):
        run(bad)


def test_three_coders_give_three_pairs_and_alpha_like_the_krippendorff_package():
    # cy: like ann but attends phone in seconds 0-2 and codes nothing from 14 on
    c_att = "ppptt" + A_ATTENDED[5:14] + "??????"
    c_view = A_IN_VIEW[:14] + "??????"
    codes = pd.concat([two_coders(), rows("cy", c_att, c_view)], ignore_index=True)
    res = run(codes)
    assert [(p.row["coder_a"], p.row["coder_b"]) for p in res.pairs] == [
        ("ann", "bea"), ("ann", "cy"), ("bea", "cy")]
    alpha_row = res.alpha
    assert alpha_row["n_coders"] == 3
    assert alpha_row["seconds_compared"] == 18   # seconds 18-19: only ann coded them
    assert alpha_row["seconds_all_coders"] == 14  # seconds 0-13

    # Reference: krippendorff (PyPI), nominal; codes as numbers, NaN = not coded.
    # Krippendorff (2011), "Computing Krippendorff's alpha-reliability".
    num = {"none": 0, "tv": 1, "phone": 2}
    data = np.full((3, 20), np.nan)
    for i, spec in enumerate([A_ATTENDED, B_ATTENDED, c_att]):
        for s, ch in enumerate(spec):
            if ch != "?":
                data[i, s] = num[CODES[ch] or "none"]
    ref = krippendorff.alpha(reliability_data=data, level_of_measurement="nominal")
    assert alpha_row["alpha_attended"] == pytest.approx(ref, abs=1e-12)

    state = {"": 0, "tv": 1, "phone": 1, "phone;tv": 2}
    sdata = np.full((3, 20), np.nan)
    for i, spec in enumerate([A_IN_VIEW, B_IN_VIEW, c_view]):
        for s, ch in enumerate(spec):
            if ch != "?":
                sdata[i, s] = state[VIEW[ch]]
    sref = krippendorff.alpha(reliability_data=sdata, level_of_measurement="nominal")
    assert alpha_row["alpha_state"] == pytest.approx(sref, abs=1e-12)


def test_study_tables_pool_sessions():
    one = run(two_coders())
    # a second session: the same codes, so pooled kappa equals the session kappa,
    # and pooled counts double
    other = session_agreement(SessionKey("p02", "s1"), two_coders(), 20, AgreementSettings(),
                              SwitchSettings(), DwellSettings())
    tables = agreement_tables([one, other], 2, "optimal")
    assert len(tables["sessions.csv"]) == 2
    assert len(tables["confusion.csv"]) == 18
    assert tables["alpha.csv"].empty
    study = tables["study.csv"].iloc[0]
    assert study["sessions"] == 2 and study["coder_pairs"] == 2
    assert study["seconds_compared"] == 36
    assert study["kappa_attended"] == pytest.approx(149 / 185)
    assert study["kappa_state"] == pytest.approx(120 / 174)
    assert (study["switches_a"], study["switches_matched"]) == (6, 6)
    assert study["kappa_attended_band"] == "almost perfect"
    # pooled alpha over both sessions' seconds coded twice, against the package
    num = {"t": 1, "p": 2, ".": 0, "?": np.nan}
    data = np.array([[num[c] for c in A_ATTENDED * 2], [num[c] for c in B_ATTENDED * 2]])
    ref = krippendorff.alpha(reliability_data=data, level_of_measurement="nominal")
    assert study["alpha_attended"] == pytest.approx(ref, abs=1e-12)


def _same_agreement(x: SessionAgreement, y: SessionAgreement) -> None:
    assert x.coders == y.coders and x.alpha == y.alpha
    pd.testing.assert_frame_equal(x.labels, y.labels)
    pd.testing.assert_frame_equal(x.state_labels, y.state_labels)
    assert len(x.pairs) == len(y.pairs)
    for p, q in zip(x.pairs, y.pairs):
        assert p.row == q.row
        for name in ("confusion", "state_table", "matches"):
            pd.testing.assert_frame_equal(getattr(p, name), getattr(q, name))


def _three_coders() -> pd.DataFrame:
    c_att = "ppptt" + A_ATTENDED[5:14] + "??????"
    c_view = A_IN_VIEW[:14] + "??????"
    return pd.concat([two_coders(), rows("cy", c_att, c_view)], ignore_index=True)


def test_row_order_and_categorical_columns_do_not_change_the_result():
    codes = _three_coders()
    ref = run(codes)
    shuffled = codes.sample(frac=1.0, random_state=3).reset_index(drop=True)
    _same_agreement(run(shuffled), ref)
    as_category = codes.astype({"in_view": "category", "attended": "category",
                                "coder": "category", "second": "int32"})
    _same_agreement(run(as_category), ref)


def test_labels_are_the_codes_laid_out_by_second_and_coder():
    # reference: a plain pivot of the log, '' read as 'none', states by hand
    codes = _three_coders()
    res = run(codes)
    wide = codes.pivot(index="second", columns="coder", values="attended").reindex(range(20))
    expected = wide.where(wide != "", "none")
    pd.testing.assert_frame_equal(res.labels, expected, check_names=False)
    assert res.labels.index.name == "second" and res.labels.columns.name == "coder"
    view = codes.pivot(index="second", columns="coder", values="in_view").reindex(range(20))
    state = {"": "none", "tv": "single", "phone": "single", "phone;tv": "multi"}
    for coder in res.coders:
        got = res.state_labels[coder].tolist()
        assert got == [None if pd.isna(v) else state[v] for v in view[coder]]


def test_a_second_coded_twice_is_refused_even_with_one_coder():
    one = rows("ann", A_ATTENDED, A_IN_VIEW)
    twice = pd.concat([one, one.iloc[[3]]], ignore_index=True)
    with pytest.raises(StageError, match="twice"):
        run(twice)
    late = one.copy()
    late.loc[0, "second"] = 20
    with pytest.raises(StageError, match="outside"):
        run(late)
