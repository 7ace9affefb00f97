"""Recording readers: EDF/EDF+ (written here by pyedflib, an independent EDF library),
BIDS physiological recordings, tables; and finding each session's file."""

from __future__ import annotations

import gzip
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyedflib
import pytest

from pipeline.config import SignalSettings
from pipeline.errors import InputError
from pipeline.ingest.recordings import find_recordings, read_recording
from pipeline.types import SessionKey


def _write_edf(path: Path, signals: list[tuple[str, str, float, np.ndarray]]) -> None:
    """EDF+ by pyedflib: (label, physical dimension, rate, values) per signal."""
    with pyedflib.EdfWriter(str(path), len(signals), file_type=pyedflib.FILETYPE_EDFPLUS) as w:
        headers = []
        for label, dim, fs, values in signals:
            pad = max(1e-3, 0.01 * float(values.max() - values.min()))
            # the header holds 8 characters per number: round the range outwards
            lo = float(np.floor((values.min() - pad) * 1000) / 1000)
            hi = float(np.ceil((values.max() + pad) * 1000) / 1000)
            headers.append({"label": label, "dimension": dim, "sample_frequency": fs,
                            "physical_min": lo, "physical_max": hi,
                            "digital_min": -32768, "digital_max": 32767})
        w.setSignalHeaders(headers)
        w.writeSamples([v for *_, v in signals])


def _quantum(values: np.ndarray) -> float:
    span = (values.max() - values.min()) * 1.02 + 2e-3
    return 2 * span / 65535  # one digital step, doubled for the header's 8-character rounding


def test_edf_labels_are_mapped_and_rates_kept(tmp_path):
    t32 = np.arange(0, 60, 1 / 32)
    eda = 5 + 0.5 * np.sin(t32 / 7)
    hr = 70 + 3 * np.sin(np.arange(60) / 9)
    path = tmp_path / "p01__s1.edf"
    _write_edf(path, [("GSR", "uS", 32, eda), ("Pulse", "bpm", 1, hr)])
    cfg = SignalSettings(edf_labels={"GSR": "eda_us", "pulse": "hr_bpm"})
    rec = read_recording(path, cfg)
    assert rec.sampling_rate_hz == pytest.approx(32.0)
    assert np.max(np.abs(rec.channels["eda_us"] - eda)) <= _quantum(eda)
    have = np.isfinite(rec.channels["hr_bpm"])
    assert have.sum() == 60
    np.testing.assert_allclose(rec.time_s[have], np.arange(60.0))
    assert np.max(np.abs(rec.channels["hr_bpm"][have] - hr)) <= _quantum(hr)


def test_edf_without_a_mapped_eda_signal_is_refused_with_its_labels(tmp_path):
    path = tmp_path / "p01__s1.edf"
    _write_edf(path, [("Skin", "uS", 8, np.linspace(4, 5, 80))])
    with pytest.raises(InputError) as info:
        read_recording(path, SignalSettings())
    p = info.value.problems[0]
    assert p.value == "Skin" and "edf_labels" in p.hint


def test_edf_label_named_like_a_channel_needs_no_mapping(tmp_path):
    path = tmp_path / "p01__s1.edf"
    _write_edf(path, [("EDA_US", "uS", 8, np.linspace(4, 5, 80))])
    rec = read_recording(path, SignalSettings())
    assert rec.channels["eda_us"][0] == pytest.approx(4.0, abs=1e-3)


def test_skin_resistance_is_converted_to_conductance(tmp_path):
    # G (uS) = 1000 / R (kOhm)
    kohm = np.linspace(100, 250, 80)
    path = tmp_path / "p01__s1.edf"
    _write_edf(path, [("SR", "kOhm", 8, kohm)])
    rec = read_recording(path, SignalSettings(edf_labels={"SR": "eda_us"}))
    np.testing.assert_allclose(rec.channels["eda_us"], 1000 / kohm, rtol=1e-3)
    assert any("converted to conductance" in n for n in rec.notes)
    ohm = tmp_path / "p02__s1.edf"
    _write_edf(ohm, [("SR", "Ohm", 8, kohm * 1000)])
    rec = read_recording(ohm, SignalSettings(edf_labels={"SR": "eda_kohm"}))
    np.testing.assert_allclose(rec.channels["eda_us"], 1000 / kohm, rtol=1e-3)


def test_edf_with_a_non_conductance_unit_is_refused(tmp_path):
    path = tmp_path / "p01__s1.edf"
    _write_edf(path, [("GSR", "mV", 8, np.linspace(4, 5, 80))])
    with pytest.raises(InputError, match="not a skin conductance unit"):
        read_recording(path, SignalSettings(edf_labels={"GSR": "eda_us"}))


def test_discontinuous_edf_plus_keeps_its_record_onsets(tmp_path):
    import edfio

    path = tmp_path / "p01__s1.edf"
    sig = edfio.EdfSignal(np.linspace(4, 5, 320), 32, label="eda_us", physical_dimension="uS")
    edfio.Edf([sig], annotations=[edfio.EdfAnnotation(0.0, None, "start")]).write(path)
    raw = bytearray(path.read_bytes())
    # EDF+ spec: header "reserved" field says EDF+D; each data record's first TAL
    # ("+onset\x14\x14\x00") gives its onset. Records 5-9 move 10 s later.
    raw[192:197] = b"EDF+D"
    header = int(raw[184:192])
    record = 32 * 2 + 8 * 2
    for r in range(5, 10):
        at = header + r * record + 32 * 2
        tal = f"+{r + 10}\x14\x14\x00".encode().ljust(16, b"\x00")
        raw[at: at + 16] = tal
    path.write_bytes(bytes(raw))
    rec = read_recording(path, SignalSettings())
    assert rec.time_s.size == 320
    assert rec.time_s[159] == pytest.approx(4 + 31 / 32)
    assert rec.time_s[160] == pytest.approx(15.0)
    assert any("discontinuous" in n for n in rec.notes)


def _write_bids(folder: Path, name: str, columns: list[str], data: np.ndarray,
                meta: dict | None = None, sidecar: bool = True) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}_physio.tsv.gz"
    with gzip.open(path, "wt") as fh:
        for row in data:
            fh.write("\t".join("n/a" if np.isnan(v) else f"{v:.6f}" for v in row) + "\n")
    if sidecar:
        info = {"SamplingFrequency": 16, "StartTime": -2.5, "Columns": columns}
        info.update(meta or {})
        (folder / f"{name}_physio.json").write_text(json.dumps(info))
    return path


def test_bids_physio_recording_is_read_with_its_sidecar(tmp_path):
    # BIDS specification, physiological recordings: no header row; SamplingFrequency,
    # StartTime (s, may be negative) and Columns in the JSON sidecar
    n = 16 * 30
    data = np.c_[np.linspace(3, 4, n), np.full(n, 72.0), np.zeros(n)]
    path = _write_bids(tmp_path / "sub-p01" / "ses-s1" / "beh", "sub-p01_ses-s1_task-evening",
                       ["gsr", "hr_bpm", "trigger"], data, {"gsr": {"Units": "uS"}})
    rec = read_recording(path, SignalSettings(edf_labels={"gsr": "eda_us"}))
    assert rec.time_s[0] == -2.5 and rec.sampling_rate_hz == pytest.approx(16.0)
    np.testing.assert_allclose(rec.channels["eda_us"], data[:, 0], atol=1e-6)
    assert set(rec.channels) == {"eda_us", "hr_bpm"}


def test_bids_sidecar_may_be_inherited_from_higher_up(tmp_path):
    root = tmp_path / "signals"
    (root / "dataset_description.json").parent.mkdir(parents=True, exist_ok=True)
    (root / "dataset_description.json").write_text("{}")
    (root / "task-evening_physio.json").write_text(json.dumps(
        {"SamplingFrequency": 4, "StartTime": 0, "Columns": ["eda_us"]}))
    path = _write_bids(root / "sub-p01" / "beh", "sub-p01_task-evening",
                       ["eda_us"], np.full((40, 1), 5.0), sidecar=False)
    rec = read_recording(path, SignalSettings())
    assert rec.sampling_rate_hz == pytest.approx(4.0)


def test_bids_problems_name_the_file(tmp_path):
    path = _write_bids(tmp_path, "sub-p01_task-x", ["eda_us"], np.ones((10, 2)))
    with pytest.raises(InputError, match="has 2 columns but its sidecar names 1"):
        read_recording(path, SignalSettings())
    lonely = _write_bids(tmp_path / "b", "sub-p02_task-x", ["eda_us"], np.ones((10, 1)),
                         sidecar=False)
    with pytest.raises(InputError, match="has no JSON sidecar"):
        read_recording(lonely, SignalSettings())


def test_tables_convert_resistance_and_keep_intervals(tmp_path):
    path = tmp_path / "p01__s1.csv"
    pd.DataFrame({"time_s": [0.0, 0.5, 1.0], "eda_kohm": [200.0, 250.0, 0.0],
                  "ibi_ms": [np.nan, 810.0, np.nan]}).to_csv(path, index=False)
    rec = read_recording(path, SignalSettings())
    np.testing.assert_allclose(rec.channels["eda_us"], [5.0, 4.0, np.nan])
    assert np.isnan(rec.channels["ibi_ms"][0]) and rec.channels["ibi_ms"][1] == 810.0


def test_unknown_form_is_refused(tmp_path):
    path = tmp_path / "p01__s1.mat"
    path.write_bytes(b"\x00")
    with pytest.raises(InputError, match="not a recording form"):
        read_recording(path, SignalSettings())


def test_find_recordings_by_name_and_by_bids_entities(tmp_path):
    signals = tmp_path / "signals"
    signals.mkdir()
    keys = [SessionKey("p01", "s1"), SessionKey("p01", "s2"), SessionKey("p02", "s1"),
            SessionKey("p03", "s1")]
    _write_edf(signals / "p01__s1.edf", [("eda_us", "uS", 8, np.linspace(4, 5, 80))])
    bids_s2 = _write_bids(signals / "sub-p01" / "ses-s2" / "beh", "sub-p01_ses-s2_task-tv",
                          ["eda_us"], np.full((20, 1), 5.0))
    # also a BIDS file for p01/s1: the name-matched EDF wins
    _write_bids(signals / "sub-p01" / "ses-s1" / "beh", "sub-p01_ses-s1_task-tv",
                ["eda_us"], np.full((20, 1), 5.0))
    # no ses entity: belongs to a participant with a single session
    bids_p02 = _write_bids(signals / "sub-p02" / "beh", "sub-p02_task-tv",
                           ["eda_us"], np.full((20, 1), 5.0))
    found = find_recordings(signals, keys)
    assert found == {keys[0]: signals / "p01__s1.edf", keys[1]: bids_s2, keys[2]: bids_p02}


def test_two_bids_recordings_for_one_session_are_an_error(tmp_path):
    signals = tmp_path / "signals"
    for task in ("tv", "phone"):
        _write_bids(signals / "sub-p01" / "ses-s1" / "beh", f"sub-p01_ses-s1_task-{task}",
                    ["eda_us"], np.full((20, 1), 5.0))
    with pytest.raises(InputError, match="second BIDS recording for session p01/s1"):
        find_recordings(signals, [SessionKey("p01", "s1")])
