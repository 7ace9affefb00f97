"""Report stage: findings charts, the offline report page and the findings deck.

``build_report(out_dir)`` reads a finished run folder and writes, next to its tables::

    OUT/charts/<chart>.{png,svg,html}   one finding per chart (PNG at 2x for slides)
    OUT/charts/index.csv                 each chart's finding and file sizes
    OUT/report.html                      self-contained page, opens offline
    OUT/deck.pptx                        16:9 findings deck

It reads only the run's files, so `screenweave report OUT` can rebuild everything
without rerunning the pipeline. Tables a chart needs but the run did not write leave
that chart out, with the reason in the report and the deck.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from pipeline.report.charts import CHARTS, build_figures
from pipeline.report.deck import build_deck
from pipeline.report.export import javascript_bundle, write_chart
from pipeline.report.html import render_report
from pipeline.report.methods_text import build_methods
from pipeline.report.palette import Palette, build_palette
from pipeline.report.run_files import RunFiles, read_run

CHART_EXTENSIONS = ("png", "svg", "html")


def run_palette(run: RunFiles) -> Palette:
    """Colours fixed by the [platforms.groups] order (else the sorted codes seen)."""
    return build_palette(run.vocabulary, run.platforms_seen, run.platform_labels, run.cohorts)


def build_report(out_dir: Path, *, session: str | None = None) -> list[Path]:
    """Write charts, report.html and deck.pptx for a finished run; return the paths.

    ``session`` ('participant/session') picks the session of the timeline chart;
    by default it is the session with the most typical switch rate.
    """
    out_dir = Path(out_dir)
    run = read_run(out_dir)
    pal = run_palette(run)
    figures, omitted = build_figures(run, pal, session=session)

    charts_dir = out_dir / "charts"
    charts_dir.mkdir(parents=True, exist_ok=True)
    drawn = {f.name for f in figures}
    for name in CHARTS:  # a chart left out this time must not survive from an earlier build
        if name not in drawn:
            for ext in CHART_EXTENSIONS:
                (charts_dir / f"{name}.{ext}").unlink(missing_ok=True)

    bundle = javascript_bundle()
    files = [write_chart(f, charts_dir, bundle) for f in figures]
    index = charts_dir / "index.csv"
    pd.DataFrame([{"chart": c.figure.name, "finding": c.figure.finding,
                   "detail": c.figure.detail, "png": c.png.name, "svg": c.svg.name,
                   "html": c.html.name, "png_width_px": c.width_px,
                   "png_height_px": c.height_px} for c in files]
                 + [{"chart": k, "finding": "", "detail": f"left out: {v}"}
                    for k, v in omitted.items()]).to_csv(index, index=False)

    refs = list(dict.fromkeys(r for f in figures for r in f.references))
    methods = build_methods(run, refs)
    report = out_dir / "report.html"
    report.write_text(render_report(run, files, omitted, methods, bundle), encoding="utf-8")
    deck = build_deck(run, files, omitted, out_dir / "deck.pptx")

    written = [p for c in files for p in (c.png, c.svg, c.html)]
    return written + [index, report, deck]


__all__ = ["build_report", "run_palette"]
