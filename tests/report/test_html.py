"""report.html and the chart pages as files: offline, escaped, numbers from the CSVs."""

from __future__ import annotations

import html
import math
import re

import pandas as pd
import pytest

from report_run import HOSTILE_CODE, HOSTILE_STUDY

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def page(built_report):
    out, _ = built_report
    return out, (out / "report.html").read_text(encoding="utf-8")


def _offline(text: str) -> None:
    assert not re.search(r"<script[^>]*\bsrc\s*=", text, re.I)
    assert not re.search(r"<link\b", text, re.I)
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*(https?:)?//""", text, re.I)
    assert not re.search(r"url\(\s*['\"]?https?:", text, re.I)
    assert "cdn" not in text.lower().replace("cdna", "")
    assert "connect-src 'none'" in text and "default-src 'none'" in text


def test_report_needs_no_network(page):
    _, text = page
    _offline(text)
    assert "vegaEmbed" in text  # the library is inline, not fetched


def test_every_chart_page_needs_no_network(built_report):
    out, paths = built_report
    pages = [p for p in paths if p.suffix == ".html" and p.parent.name == "charts"]
    assert len(pages) == 10
    for p in pages:
        _offline(p.read_text(encoding="utf-8"))


def test_hostile_strings_appear_only_escaped(page):
    _, text = page
    assert HOSTILE_STUDY not in text and HOSTILE_CODE not in text
    assert f"<h1>{html.escape(HOSTILE_STUDY)}</h1>" in text
    assert f"<title>{html.escape(HOSTILE_STUDY)} — findings</title>" in text
    assert html.escape(HOSTILE_CODE) in text  # e.g. in the appendix tables
    # inside the JSON specs '<' is written \u003c, so no tag can open or close there
    assert "\\u003cimg src=x onerror=alert(2)\\u003e" in text


def test_headline_numbers_come_from_comparisons_csv(page):
    out, text = page
    comp = pd.read_csv(out / "models" / "comparisons.csv")
    row = comp[(comp.outcome == "switches_per_hour") & (comp.term == "cohort[teen]")].iloc[0]
    # log-scale rows are reported as rate ratios exp(b) with exp(CI)
    ratio, low, high = (math.exp(row[c]) for c in ("estimate", "ci_low", "ci_high"))
    headline = text[text.index('id="headline"'):text.index('id="figures"')]
    assert f"teen vs adult, rate ratio {ratio:.2f}" in headline
    assert f"95% CI {low:.2f}–{high:.2f}" in headline
    assert f"FDR-adjusted p = {row.p_fdr:.3f}" in headline
    assert "Intercept" not in headline and "var(participant)" not in headline
    assert "eda lowpass: butterworth" in text  # a method key named as the run reported it


def test_methods_references_qc_privacy_and_appendix_are_present(page):
    _, text = page
    methods = text[text.index('id="methods"'):text.index('id="qc"')]
    assert "at most 3 unattended seconds" in methods  # [switching] max_gap_s default
    for ref in ("Benjamini &amp; Hochberg (1995)", "Bates et al. 2015", "Kaplan, E. L. &amp; Meier",
                "Okabe, M. &amp; Ito", "Landis, J. R. &amp; Koch"):
        assert ref in methods
    assert "11 of 12" not in methods
    assert 'id="privacy"' in text and "pseudonyms" in text
    for rel in ("metrics/sessions.csv", "models/comparisons.csv", "qc/sessions.csv",
                "agreement/sessions.csv", "power/power.csv"):
        assert f"<summary>{rel} (" in text
    assert "low_valid_signal" in text[text.index('id="qc"'):]
