"""Signal files: missing and left-over recordings are warnings; unreadable ones refusals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from ingest_builders import load, write_recording, write_study
from pipeline.config import SignalSettings
from pipeline.errors import InputError
from pipeline.ingest import read_recording_checked
from pipeline.types import SessionKey


def test_each_session_gets_its_recording(tmp_path):
    write_study(tmp_path)
    study = load(tmp_path)
    assert study.recordings == {
        SessionKey("p01", "s1"): tmp_path.resolve() / "signals" / "p01__s1.parquet",
        SessionKey("p02", "s1"): tmp_path.resolve() / "signals" / "p02__s1.parquet"}
    assert set(study.recordings.values()) <= set(study.input_files)


def test_session_without_recording_is_a_warning(tmp_path):
    write_study(tmp_path)
    (tmp_path / "signals" / "p02__s1.parquet").unlink()
    study = load(tmp_path)
    assert SessionKey("p02", "s1") not in study.recordings
    assert any("1 session(s) have no recording (p02/s1)" in w for w in study.warnings)


def test_no_signals_folder_is_a_warning(tmp_path):
    write_study(tmp_path, signals=False)
    study = load(tmp_path)
    assert study.recordings == {}
    assert any("signals/: no such folder" in w for w in study.warnings)


def test_file_matching_no_session_is_a_warning(tmp_path):
    write_study(tmp_path)
    write_recording(tmp_path / "signals" / "p09__s1.parquet")
    (tmp_path / "signals" / "notes.txt").write_text("sensor worn on left hand")
    warnings = load(tmp_path).warnings
    assert any(w.startswith("signals/p09__s1.parquet: matches no session") for w in warnings)
    assert any(w.startswith("signals/notes.txt: matches no session") for w in warnings)


def test_session_file_in_a_form_not_read_is_named(tmp_path):
    write_study(tmp_path)
    (tmp_path / "signals" / "p02__s1.parquet").rename(tmp_path / "signals" / "p02__s1.xyz")
    warnings = load(tmp_path).warnings
    assert any(w.startswith("signals/p02__s1.xyz: named for session p02/s1") for w in warnings)


def test_truncated_parquet_becomes_an_input_error_naming_the_file(tmp_path):
    path = tmp_path / "p01__s1.parquet"
    write_recording(path)
    path.write_bytes(path.read_bytes()[:200])
    with pytest.raises(InputError) as info:
        read_recording_checked(path, SignalSettings(), "signals/p01__s1.parquet")
    assert info.value.problems[0].file == "signals/p01__s1.parquet"
    assert "cannot be read as a recording" in info.value.render()


def test_recording_input_errors_are_relabelled_with_the_folder(tmp_path):
    path = tmp_path / "p01__s1.parquet"
    pd.DataFrame({"time_s": [0.0, 1.0], "temperature": [30.0, 31.0]}).to_parquet(path)
    with pytest.raises(InputError) as info:
        read_recording_checked(path, SignalSettings(), "signals/p01__s1.parquet")
    assert info.value.problems[0].file == "signals/p01__s1.parquet"
    assert info.value.problems[0].column == "eda_us"


def test_good_recording_is_read(tmp_path):
    path = tmp_path / "p01__s1.parquet"
    write_recording(path, seconds=10, rate_hz=8)
    rec = read_recording_checked(path, SignalSettings())
    assert rec.sampling_rate_hz == pytest.approx(8.0)
    assert np.isfinite(rec.channels["eda_us"]).all()


def test_numeric_parquet_is_read_as_pandas_reads_it(tmp_path):
    # Parquet recordings of numeric columns skip pandas (Arrow -> float64 arrays); the
    # arrays must equal what pandas' reader gives: float32 widened exactly, nulls as
    # NaN, integers as floats. A text column sends the file through pandas instead,
    # where a cell that is not a number becomes NaN.
    from pipeline.ingest.recordings import read_table_recording

    eda = pd.array([5.0, None, 5.25, 6.5], dtype="Float32")
    numeric = pd.DataFrame({"time_s": [0.0, 0.25, 0.5, 0.75], "eda_us": eda,
                            "hr_bpm": pd.array([70, 71, None, 72], dtype="Int64")})
    numeric.to_parquet(tmp_path / "a.parquet", index=False)
    rec = read_table_recording(tmp_path / "a.parquet", SignalSettings())
    np.testing.assert_array_equal(rec.channels["eda_us"], [5.0, np.nan, 5.25, 6.5])
    np.testing.assert_array_equal(rec.channels["hr_bpm"], [70.0, 71.0, np.nan, 72.0])
    assert rec.channels["eda_us"].dtype == np.float64
    text = numeric.assign(hr_bpm=["70", "n/a", "", "72"])
    text.to_parquet(tmp_path / "b.parquet", index=False)
    rec = read_table_recording(tmp_path / "b.parquet", SignalSettings())
    np.testing.assert_array_equal(rec.channels["hr_bpm"], [70.0, np.nan, np.nan, 72.0])
