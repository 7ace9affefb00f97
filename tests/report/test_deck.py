"""deck.pptx read back: 16:9, slide count, a picture per chart, numbers from the CSVs."""

from __future__ import annotations

import math

import pandas as pd
import pytest
from pptx import Presentation
from pptx.enum.shapes import MSO_SHAPE_TYPE

from report_run import HOSTILE_STUDY

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def deck(built_report):
    out, _ = built_report
    idx = pd.read_csv(out / "charts" / "index.csv", keep_default_na=False)
    return out, Presentation(out / "deck.pptx"), idx[idx["png"] != ""]


def _texts(slide) -> list[str]:
    return [sh.text_frame.text for sh in slide.shapes if sh.has_text_frame]


def test_deck_is_16_9_with_title_glance_one_slide_per_chart_and_closing(deck):
    _, prs, idx = deck
    assert prs.slide_width * 9 == prs.slide_height * 16
    slides = list(prs.slides)
    assert len(slides) == 2 + len(idx) + 1
    assert slides[0].shapes.title.text == HOSTILE_STUDY  # plain text in a slide
    assert slides[1].shapes.title.text == "Study at a glance"
    assert slides[-1].shapes.title.text == "About these results"


def test_every_chart_slide_has_its_picture_finding_and_notes(deck):
    _, prs, idx = deck
    chart_slides = list(prs.slides)[2:2 + len(idx)]
    for slide, row in zip(chart_slides, idx.itertuples()):
        pics = [sh for sh in slide.shapes if sh.shape_type == MSO_SHAPE_TYPE.PICTURE]
        assert len(pics) == 1
        assert pics[0].left >= 0 and pics[0].left + pics[0].width <= prs.slide_width
        assert pics[0].top + pics[0].height <= prs.slide_height
        assert slide.shapes.title.text == row.finding
        notes = slide.notes_slide.notes_text_frame.text
        assert "Method and n:" in notes and any(ch.isdigit() for ch in notes)


def test_headline_numbers_equal_comparisons_csv(deck):
    out, prs, idx = deck
    comp = pd.read_csv(out / "models" / "comparisons.csv")
    slides = {row.chart: s for s, row in zip(list(prs.slides)[2:], idx.itertuples())}
    row = comp[(comp.outcome == "switches_per_hour") & (comp.term == "cohort[teen]")].iloc[0]
    rate = slides["switch_rate"]
    # rate ratio = exp(log-scale estimate), CI = exp(CI) (comparisons.csv `scale` = log)
    assert rate.shapes.title.text.endswith(f"rate ratio {math.exp(row.estimate):.2f}")
    assert (f"95% CI {math.exp(row.ci_low):.2f}–{math.exp(row.ci_high):.2f}"
            in " ".join(_texts(rate)))
    tested = comp[comp.p_fdr.notna()]  # the FDR family: the models stage adjusted these
    k = int((tested.p_fdr < 0.05).sum())
    assert slides["effects"].shapes.title.text.startswith(
        f"{k} of {len(tested)} tested model effects")


def test_glance_slide_counts_match_sessions_csv(deck):
    out, prs, _ = deck
    s = pd.read_csv(out / "metrics" / "sessions.csv")
    glance = list(prs.slides)[1]
    table = next(sh for sh in glance.shapes if sh.has_table).table
    rows = {table.cell(r, 0).text: [table.cell(r, c).text for c in range(1, 5)]
            for r in range(1, len(table.rows))}
    for cohort, g in s.groupby("cohort"):
        assert rows[cohort][0] == str(g.participant_id.nunique())
        assert rows[cohort][1] == str(len(g))
        assert float(rows[cohort][2]) == pytest.approx(g.coded_hours.sum(), rel=0.01)
    body = " ".join(_texts(glance))
    assert "skin conductance" in body and "heart rate" in body and "3 platforms" in body
