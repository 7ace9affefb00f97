"""Fixtures of the report tests: the hand-made run folder, and its report built once."""

from __future__ import annotations

from pathlib import Path

import pytest

from report_run import write_run


@pytest.fixture(scope="session")
def fixture_run(tmp_path_factory) -> Path:
    """The hand-made run folder (no report built)."""
    return write_run(tmp_path_factory.mktemp("run") / "out")


@pytest.fixture(scope="session")
def built_report(tmp_path_factory):
    """The hand-made run with its report built once: (out_dir, written paths)."""
    from pipeline.report import build_report

    out = write_run(tmp_path_factory.mktemp("built") / "out")
    return out, build_report(out)
