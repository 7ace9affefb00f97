"""The methods text follows the resolved configuration and the methods that ran."""

from __future__ import annotations

import json

from pipeline.report.methods_text import build_methods
from pipeline.report.run_files import read_run


def test_methods_follow_the_resolved_configuration(fixture_run, tmp_path):
    import shutil

    out = tmp_path / "out"
    shutil.copytree(fixture_run, out)
    m = json.loads((out / "manifest.json").read_text())
    m["config"]["switching"] = {"max_gap_s": 5, "min_bout_s": 2, "min_multi_minutes": 7.5}
    m["config"]["coding"] = {"primary_coder": "ana"}
    m["config"]["arousal"] = {"source": "phasic", "min_state_minutes": 4}
    m["config"]["models"] = {"fdr_q": 0.1, "covariates": ["birth_year"]}
    m["methods"]["dwell"] = {"km_pooled": "A. Author (2001). A dwell paper. J Dwell 1:1–2."}
    (out / "manifest.json").write_text(json.dumps(m))
    methods = build_methods(read_run(out))
    text = " ".join(t for _, t in methods.sections)
    assert "at most 5 unattended seconds" in text
    assert "shorter than 2 s" in text and "less than 7.5 minutes" in text
    assert "coder 'ana'" in text
    assert "phasic component" in text and "at least 4 valid minutes" in text
    assert "q = 0.1" in text and "adjusting for birth_year" in text
    assert "reference cohort 'adult'" in text
    # each method that ran is named with its numbered reference
    n = methods.references.index("km pooled: A. Author (2001). A dwell paper. J Dwell 1:1–2.") + 1
    assert f"km pooled [{n}]" in text
    assert any("Benjamini & Hochberg (1995)" in r for r in methods.references)
    assert "eda lowpass: butterworth" in text  # a bare method key is named, not cited
    assert len(methods.references) == len(set(methods.references))


def test_agreement_and_power_paragraphs_only_when_those_ran(tmp_path):
    from report_run import write_run

    out = write_run(tmp_path / "out", optional=False)
    headings = [h for h, _ in build_methods(read_run(out)).sections]
    assert "Coder agreement" not in headings and "Power analysis" not in headings
