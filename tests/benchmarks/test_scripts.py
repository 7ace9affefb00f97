"""benchmarks/: every script loads (they import each other's helpers)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize("script", sorted(p.name for p in (ROOT / "benchmarks").glob("*.py")))
def test_every_benchmark_script_loads(script, monkeypatch):
    # the scripts import each other's helpers (long_and_wide.py uses scaling.py's):
    # a renamed helper must fail here, not on the next benchmark run
    monkeypatch.syspath_prepend(str(ROOT / "benchmarks"))
    spec = importlib.util.spec_from_file_location(f"bench_{script[:-3]}",
                                                  ROOT / "benchmarks" / script)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert callable(module.main)
