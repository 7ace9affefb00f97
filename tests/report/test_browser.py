"""The report opened in a real headless Chromium: every chart drawn, no console output,
hostile strings shown as text. Chromium missing is a failure, not a skip (CI installs it
with .ci/install_chromium.sh)."""

from __future__ import annotations

import json

import pandas as pd
import pytest
from PIL import Image

import report_browser as rb
from report_run import HOSTILE_CODE, HOSTILE_STUDY

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def browser():
    if rb.chromium() is None:
        pytest.fail("chromium is not installed: run .ci/install_chromium.sh (Debian package "
                    "'chromium'); the report's browser test needs it", pytrace=False)
    return rb


@pytest.fixture(scope="module")
def report_dom(browser, built_report):
    out, _ = built_report
    dom, console = browser.dump_dom(out / "report.html")
    return out, dom, console, browser.summarise(dom)


def test_every_chart_is_drawn_as_svg_after_load(report_dom):
    out, dom, console, s = report_dom
    index = pd.read_csv(out / "charts" / "index.csv", keep_default_na=False)
    expected = {f"chart-{c}" for c in index.loc[index["png"] != "", "chart"]}
    assert len(expected) == 10
    assert set(s.charts) == expected
    for cid, info in s.charts.items():
        assert info["rendered"] == "yes", cid
        assert info["svg"] + info["canvas"] >= 1, cid


def test_no_console_message_and_no_uncaught_error(report_dom):
    _, _, console, _ = report_dom
    assert console == []


def test_hostile_study_name_and_platform_code_are_text_not_markup(report_dom):
    out, dom, _, s = report_dom
    n_charts = len(s.charts)
    # our scripts only: the Vega bundle and the embedding script run; one JSON spec per
    # chart is data (the hostile code sits in it as \u003c-escaped text)
    code = [js for js, t in zip(s.scripts, s.script_types) if t != "application/json"]
    data = [js for js, t in zip(s.scripts, s.script_types) if t == "application/json"]
    assert len(code) == 2 and len(data) == n_charts
    assert not any("alert(1)" in js or "alert(2)" in js for js in code)
    assert all("<" not in js for js in data)
    assert any(json.loads(js) for js in data)
    assert s.h1 == [HOSTILE_STUDY]  # shown as typed, so it was escaped, not parsed
    assert HOSTILE_CODE in s.svg_text  # a lane / legend label drawn by Vega as text
    assert "<img src=x" not in dom  # never an element, only &lt;img ... text


def test_chart_page_renders_offline_on_its_own(browser, built_report):
    out, _ = built_report
    dom, console = browser.dump_dom(out / "charts" / "timeline.html")
    s = browser.summarise(dom)
    assert console == []
    assert [c["svg"] >= 1 and c["rendered"] == "yes" for c in s.charts.values()] == [True]


def test_screenshot_of_the_report(browser, built_report, tmp_path):
    out, _ = built_report
    png = browser.screenshot(out / "report.html", tmp_path / "report.png")
    with Image.open(png) as im:
        assert im.size == (1280, 2000)
        grey = im.convert("L")
        lo, hi = grey.getextrema()
        assert hi - lo > 200  # text and charts, not a blank page
