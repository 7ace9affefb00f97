"""deck.pptx: the findings deck to start the presentation from.

16:9. A title slide, a study-at-a-glance slide, one slide per chart whose title states
the finding with its number (speaker notes: the method and n), and a closing slide
with what was left out and the data cautions. Built from the same Figures as the
report page, so the numbers agree.
"""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
from pptx import Presentation
from pptx.dml.color import RGBColor
from pptx.util import Emu, Inches, Pt

from pipeline.report import numbers as fmt
from pipeline.report.charts import CHARTS
from pipeline.report.export import ChartFiles, png_size
from pipeline.report.run_files import RunFiles

SLIDE_H = Inches(7.5)
SLIDE_W = Emu(SLIDE_H * 16 // 9)  # exactly 16:9 (13.333 in)
MARGIN = Inches(0.5)
INK = RGBColor(0x1A, 0x1A, 0x1A)
MUTED = RGBColor(0x4D, 0x4D, 0x4D)
TITLE_PT, DETAIL_PT, BODY_PT = 28, 14, 18

LAYOUT_TITLE, LAYOUT_TITLE_ONLY = 0, 5  # python-pptx default template

#: Timeline channels and how the glance slide names them.
SENSORS = {"eda_us": "skin conductance", "hr_bpm": "heart rate", "motion_g": "motion (accelerometer)"}


def _style(tf, size: int, colour: RGBColor = INK, bold: bool = False) -> None:
    for p in tf.paragraphs:
        for r in p.runs:
            r.font.size = Pt(size)
            r.font.bold = bold
            r.font.color.rgb = colour


def _place(shape, left, top, width, height) -> None:
    shape.left, shape.top, shape.width, shape.height = (Emu(int(left)), Emu(int(top)),
                                                        Emu(int(width)), Emu(int(height)))


def _title(slide, text: str, size: int = TITLE_PT):
    t = slide.shapes.title
    t.text = text
    _place(t, MARGIN, Inches(0.3), SLIDE_W - 2 * MARGIN, Inches(1.15))
    tf = t.text_frame
    tf.word_wrap = True
    for p in tf.paragraphs:
        p.alignment = 1  # left
    _style(tf, size, bold=True)
    return t


def _text(slide, text_lines: list[str], left, top, width, height, size=BODY_PT,
          colour: RGBColor = INK):
    box = slide.shapes.add_textbox(Emu(int(left)), Emu(int(top)), Emu(int(width)),
                                   Emu(int(height)))
    tf = box.text_frame
    tf.word_wrap = True
    for i, line in enumerate(text_lines):
        p = tf.paragraphs[0] if i == 0 else tf.add_paragraph()
        p.text = line
        p.space_after = Pt(6)
    _style(tf, size, colour)
    return box


def sensors_present(run: RunFiles) -> list[str]:
    """Channels with at least one value in some session's timeline."""
    import pyarrow.parquet as pq

    found: set[str] = set()
    for path in run.timeline_files.values():
        names = set(pq.read_schema(path).names)
        cols = [c for c in SENSORS if c in names and c not in found]
        if cols:
            df = pd.read_parquet(path, columns=cols)
            found |= {c for c in cols if df[c].notna().any()}
        if len(found) == len(SENSORS):
            break
    return [SENSORS[c] for c in SENSORS if c in found]


def glance_rows(run: RunFiles) -> list[list[str]]:
    s = run.tables["sessions"]
    rows = [["cohort", "participants", "sessions", "hours coded", "multi-platform hours"]]
    for c in run.cohorts:
        g = s[s["cohort"] == c]
        rows.append([c, str(g["participant_id"].nunique()), str(len(g)),
                     fmt.auto(pd.to_numeric(g["coded_hours"], errors="coerce").sum()),
                     fmt.auto(pd.to_numeric(g["multi_hours"], errors="coerce").sum())])
    rows.append(["all", str(s["participant_id"].nunique()), str(len(s)),
                 fmt.auto(pd.to_numeric(s["coded_hours"], errors="coerce").sum()),
                 fmt.auto(pd.to_numeric(s["multi_hours"], errors="coerce").sum())])
    return rows


def _glance(prs, run: RunFiles) -> None:
    slide = prs.slides.add_slide(prs.slide_layouts[LAYOUT_TITLE_ONLY])
    _title(slide, "Study at a glance")
    rows = glance_rows(run)
    width = Inches(7.2)
    shape = slide.shapes.add_table(len(rows), len(rows[0]), MARGIN, Inches(1.6), width,
                                   Inches(0.45) * len(rows))
    table = shape.table
    for i, row in enumerate(rows):
        for j, val in enumerate(row):
            cell = table.cell(i, j)
            cell.text = val
            _style(cell.text_frame, 16, bold=(i == 0 or i == len(rows) - 1))
    groups = run.platform_groups
    group_names = list(dict.fromkeys(groups.values()))
    coding = [f"Coding: second by second, {len(groups)} platforms in {len(group_names)} "
              f"groups ({', '.join(group_names)})"]
    if run.has("agreement"):
        coding.append(f"Double-coded: {len(run.tables['agreement'])} session pair(s)")
    sensors = sensors_present(run)
    lines = [f"Sensors: {', '.join(sensors) if sensors else 'none recorded'}"] + coding
    ok, total = run.manifest.get("sessions_ok"), run.manifest.get("sessions_total")
    if ok is not None and total is not None:
        lines.append(f"Sessions processed: {ok} of {total}")
    if run.has("qc") and "usable" in run.tables["qc"].columns:
        usable = run.tables["qc"]["usable"].astype("boolean").fillna(False).sum()
        lines.append(f"Usable after quality control: {int(usable)} of {len(run.tables['qc'])}")
    left = MARGIN + width + Inches(0.4)
    _text(slide, lines, left, Inches(1.6), SLIDE_W - left - MARGIN, Inches(5), size=BODY_PT)
    slide.notes_slide.notes_text_frame.text = (
        "Participants, sessions and hours per cohort from metrics/sessions.csv (hours coded: "
        "seconds with media codes; multi-platform hours: seconds with two or more platforms "
        "in view). Sensors: channels with values in the per-second timelines. "
        f"{len(run.tables['sessions'])} sessions in all.")


def _chart_slide(prs, c: ChartFiles) -> None:
    f = c.figure
    slide = prs.slides.add_slide(prs.slide_layouts[LAYOUT_TITLE_ONLY])
    _title(slide, f.finding, size=TITLE_PT if len(f.finding) <= 70 else 24)
    _text(slide, [f.detail], MARGIN, Inches(1.45), SLIDE_W - 2 * MARGIN, Inches(0.5),
          size=DETAIL_PT, colour=MUTED)
    top, bottom = Inches(2.05), Inches(0.2)
    box_w, box_h = SLIDE_W - 2 * MARGIN, SLIDE_H - top - bottom
    w, h = png_size(c.slide_png)
    scale = min(box_w / w, box_h / h)
    pic_w, pic_h = w * scale, h * scale
    slide.shapes.add_picture(io.BytesIO(c.slide_png), Emu(int(MARGIN + (box_w - pic_w) / 2)),
                             Emu(int(top)), Emu(int(pic_w)), Emu(int(pic_h)))
    notes = slide.notes_slide.notes_text_frame
    notes.text = f"{f.finding}.\n{f.detail}.\nWhat is drawn: {f.caption}\nMethod and n: {f.method}"


def _closing(prs, run: RunFiles, omitted: dict[str, str]) -> None:
    slide = prs.slides.add_slide(prs.slide_layouts[LAYOUT_TITLE_ONLY])
    _title(slide, "About these results")
    lines = ["Every number here was computed from this run's own files; report.html has the "
             "methods, references, quality control and full tables."]
    for k, v in omitted.items():
        lines.append(f"Not shown, {CHARTS[k][0].lower()}: {v}.")
    lines.append("Personal data: the deck names pseudonymous participant IDs and shows one "
                 "session second by second. Share it only within the study's consent and "
                 "ethics approval.")
    _text(slide, lines, MARGIN, Inches(1.6), SLIDE_W - 2 * MARGIN, Inches(5.4), size=BODY_PT)
    slide.notes_slide.notes_text_frame.text = (
        "Methods, with references, are generated from the run's resolved configuration in "
        "report.html; the deck and the page are rebuilt with `screenweave report OUT`.")


def build_deck(run: RunFiles, charts: list[ChartFiles], omitted: dict[str, str],
               path: Path) -> Path:
    prs = Presentation()
    prs.slide_width, prs.slide_height = SLIDE_W, SLIDE_H
    title = prs.slides.add_slide(prs.slide_layouts[LAYOUT_TITLE])
    title.shapes.title.text = run.study_name
    _place(title.shapes.title, MARGIN, Inches(2.2), SLIDE_W - 2 * MARGIN, Inches(1.6))
    _style(title.shapes.title.text_frame, 40, bold=True)
    s = run.tables["sessions"]
    sub = title.placeholders[1]
    sub.text = (f"Findings · {s['participant_id'].nunique()} participants in "
                f"{len(run.cohorts)} cohorts · {len(s)} sessions")
    _place(sub, MARGIN, Inches(4.0), SLIDE_W - 2 * MARGIN, Inches(1.0))
    _style(sub.text_frame, 22, MUTED)
    title.notes_slide.notes_text_frame.text = (
        "Deck generated by screenweave from the run folder; every chart slide's title "
        "states its finding, the notes give the method and n.")
    _glance(prs, run)
    for c in charts:
        _chart_slide(prs, c)
    _closing(prs, run, omitted)
    prs.save(path)
    return path
