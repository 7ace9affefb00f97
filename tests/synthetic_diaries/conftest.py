"""A small synthetic study, generated once per test session, shared by the tests here."""

from __future__ import annotations

from pathlib import Path

import pytest

from synth_fixtures import small_options
from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import SynthOptions


@pytest.fixture(scope="session")
def small_opts() -> SynthOptions:
    return small_options()


@pytest.fixture(scope="session")
def small_study(tmp_path_factory, small_opts) -> Path:
    return generate_study(tmp_path_factory.mktemp("small_study"), small_opts)
