"""Outputs are written atomically and only inside the output folder."""

import pandas as pd
import pytest

from pipeline.errors import InputError
from pipeline.outputs import OutputFolder


def test_refuses_paths_that_escape_the_folder(tmp_path):
    out = OutputFolder(tmp_path / "out")
    for bad in ("../evil.csv", "timeline/../../evil.csv", "/etc/passwd"):
        with pytest.raises(InputError, match="outside the output folder"):
            out.csv(bad, pd.DataFrame({"a": [1]}), "test")
    assert not (tmp_path / "evil.csv").exists()


def test_failed_write_leaves_no_file_and_no_temporary(tmp_path):
    out = OutputFolder(tmp_path)

    class Boom(pd.DataFrame):
        def to_csv(self, *a, **k):  # writes half, then fails
            open(a[0], "w").write("partial")
            raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        out.csv("metrics/x.csv", Boom({"a": [1]}), "test")
    assert list((tmp_path / "metrics").iterdir()) == []


def test_rewrite_replaces_whole_file_and_hashes_are_recorded(tmp_path):
    out = OutputFolder(tmp_path)
    out.csv("t.csv", pd.DataFrame({"a": [1, 2]}), "metrics")
    out.csv("t.csv", pd.DataFrame({"a": [3]}), "metrics")
    assert (tmp_path / "t.csv").read_text() == "a\n3\n"
    h = out.hashes()
    assert h["t.csv"]["stage"] == "metrics" and len(h["t.csv"]["sha256"]) == 64
