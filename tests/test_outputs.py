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


def test_csv_blocks_join_to_the_whole_tables_bytes():
    # the runner has workers format a long table in blocks of rows: joined, the blocks
    # must be byte for byte what pandas writes for the whole table (floats in their
    # shortest round-trip form, NaN as an empty cell, text quoted where needed)
    import numpy as np
    import pandas as pd

    from pipeline.outputs import csv_bytes, row_blocks

    rng = np.random.default_rng(3)
    df = pd.DataFrame({"participant_id": [f"p{i % 7}" for i in range(1001)],
                       "note": ["a,b" if i % 5 == 0 else "" for i in range(1001)],
                       "x": rng.normal(size=1001), "n": np.arange(1001)})
    df.loc[::9, "x"] = np.nan
    whole = df.to_csv(index=False).encode("utf-8")
    for n, min_rows in [(1, 10), (2, 10), (3, 400), (4, 2000)]:
        parts = row_blocks(df, n, min_rows)
        assert len(parts) == max(1, min(n, len(df) // min_rows))
        assert b"".join(csv_bytes(p) for p in parts) == whole
    empty = pd.DataFrame(columns=["a", "b"])
    assert b"".join(csv_bytes(p) for p in row_blocks(empty, 2, 10)) == \
        empty.to_csv(index=False).encode()
