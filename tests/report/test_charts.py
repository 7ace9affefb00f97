"""The chart files: three formats each, PNG at twice the SVG size and not blank,
one colour per platform in every chart."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from pipeline.report import run_palette
from pipeline.report.charts import CHARTS
from pipeline.report.run_files import read_run

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def index(built_report):
    out, _ = built_report
    return out, pd.read_csv(out / "charts" / "index.csv", keep_default_na=False)


def test_every_chart_is_written_as_png_svg_and_html(index):
    out, idx = index
    assert list(idx["chart"]) == list(CHARTS)  # the fixture run has every table
    for row in idx.itertuples():
        for ext in ("png", "svg", "html"):
            assert (out / "charts" / f"{row.chart}.{ext}").stat().st_size > 1000
        assert row.finding and any(ch.isdigit() for ch in row.finding)  # carries a number


def test_png_is_the_stated_size_twice_the_svg_and_not_blank(index):
    out, idx = index
    for row in idx.itertuples():
        svg = (out / "charts" / f"{row.chart}.svg").read_text()
        w = float(re.search(r'<svg[^>]*\swidth="([\d.]+)"', svg).group(1))
        h = float(re.search(r'<svg[^>]*\sheight="([\d.]+)"', svg).group(1))
        with Image.open(out / "charts" / f"{row.chart}.png") as im:
            assert im.size == (row.png_width_px, row.png_height_px)
            assert abs(im.size[0] - 2 * w) <= 1 and abs(im.size[1] - 2 * h) <= 1
            px = np.asarray(im.convert("L"), dtype=float)
        assert px.std() > 10, row.chart  # not one flat colour
        assert (px < 200).mean() > 0.01, row.chart  # ink on the page
        assert im.size[0] >= 1200  # wide enough to fill a slide at 2x


def test_a_platform_has_the_same_colour_in_every_chart(index, built_report):
    out, idx = index
    run = read_run(out)
    pal = run_palette(run)
    seen = 0
    for row in idx.itertuples():
        page = (out / "charts" / f"{row.chart}.html").read_text()
        spec = json.loads(re.search(r'<script type="application/json"[^>]*>(.*?)</script>',
                                    page, re.S).group(1))
        for scale in _scales(spec):
            dom, rng = scale.get("domain"), scale.get("range")
            colours = isinstance(rng, list) and all(str(r).startswith("#") for r in rng)
            if colours and isinstance(dom, list) and set(dom) & set(pal.platform_labels):
                seen += 1
                assert dict(zip(dom, rng)) == {pal.label(c): pal.colour(c)
                                               for c in pal.platforms}
        svg = (out / "charts" / f"{row.chart}.svg").read_text().lower()
        if row.chart in ("timeline", "dwell"):
            for code in pal.platforms:
                assert pal.colour(code).lower() in svg
    assert seen >= 2  # the timeline lanes and the dwell curves


def _scales(node):
    if isinstance(node, dict):
        if "scale" in node and isinstance(node["scale"], dict):
            yield node["scale"]
        for v in node.values():
            yield from _scales(v)
    elif isinstance(node, list):
        for v in node:
            yield from _scales(v)


def test_missing_tables_leave_the_chart_out_and_say_why(tmp_path):
    from report_run import write_run

    from pipeline.report import build_report

    out = write_run(tmp_path / "out", hostile=False, optional=False)
    (out / "metrics" / "switch_locked.csv").unlink()
    # a stale chart from an earlier build must not survive
    (out / "charts").mkdir()
    (out / "charts" / "power.png").write_bytes(b"old")
    paths = build_report(out)
    assert not (out / "charts" / "power.png").exists()
    names = {p.stem for p in paths if p.suffix == ".png"}
    assert names == set(CHARTS) - {"switch_locked", "agreement", "power"}
    text = (out / "report.html").read_text()
    assert "Charts left out" in text
    assert "metrics/switch_locked.csv was not written by this run" in text
    assert "`screenweave agree` has not been run" in text
    idx = pd.read_csv(out / "charts" / "index.csv", keep_default_na=False)
    assert idx.set_index("chart").loc["power", "detail"].startswith("left out:")


def test_a_run_with_only_session_metrics_still_gets_a_report(tmp_path):
    # the report must not invent what the run did not write: everything else is left out
    import json

    from report_run import write_run

    from pipeline.report import build_report

    full = write_run(tmp_path / "full", hostile=False, optional=False)
    out = tmp_path / "out"
    (out / "metrics").mkdir(parents=True)
    (out / "metrics" / "sessions.csv").write_bytes((full / "metrics/sessions.csv").read_bytes())
    manifest = json.loads((full / "manifest.json").read_text())
    manifest.pop("methods")
    (out / "manifest.json").write_text(json.dumps(manifest))
    paths = build_report(out)
    assert {p.name for p in paths if p.suffix == ".png"} == {"switch_rate.png"}
    text = (out / "report.html").read_text()
    assert text.count("was not written by this run") >= 8
    assert "no model estimate" in text
    from pptx import Presentation

    assert len(Presentation(out / "deck.pptx").slides) == 4  # title, glance, 1 chart, closing
