"""Find and read each session's sensor recording (CONTRACT §1, signals/).

``find_recordings`` maps sessions to files; ``read_recording`` turns one file into a
:class:`~pipeline.types.Recording` on the sensor's own clock. Readers are chosen by
file form from :data:`READERS`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from pipeline.config import SignalSettings
from pipeline.errors import InputError
from pipeline.types import Recording, SessionKey

TABLE_SUFFIXES = (".parquet", ".csv")
CHANNELS = ("eda_us", "hr_bpm", "acc_x", "acc_y", "acc_z", "resp", "ibi_ms")


def find_recordings(signals_dir: Path, keys: list[SessionKey]) -> dict[SessionKey, Path]:
    """Map each session to its recording file, ``{participant}__{session}.{ext}``."""
    found: dict[SessionKey, Path] = {}
    if not signals_dir.is_dir():
        return found
    for key in keys:
        for suffix in TABLE_SUFFIXES:
            path = signals_dir / f"{key.stem()}{suffix}"
            if path.is_file():
                found[key] = path
                break
    return found


def _table_to_recording(df: pd.DataFrame, path: Path) -> Recording:
    name = path.name
    if "time_s" not in df.columns:
        raise InputError(name, "has no time_s column", line=1, column="time_s",
                         hint="a signal table needs time_s (seconds) and eda_us or eda_kohm")
    time_s = pd.to_numeric(df["time_s"], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(time_s)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise InputError(name, "is not a number", line=row + 2, column="time_s",
                         value=df["time_s"].iloc[row], hint="time_s must be seconds")
    steps = np.diff(time_s)
    if (steps <= 0).any():
        row = int(np.flatnonzero(steps <= 0)[0]) + 1
        raise InputError(name, "does not increase", line=row + 2, column="time_s",
                         value=time_s[row], hint="time_s must be strictly increasing")
    channels: dict[str, np.ndarray] = {}
    notes: list[str] = []
    for col in CHANNELS:
        if col in df.columns:
            channels[col] = pd.to_numeric(df[col], errors="coerce").to_numpy(dtype=float)
    if "eda_us" not in channels and "eda_kohm" in df.columns:
        kohm = pd.to_numeric(df["eda_kohm"], errors="coerce").to_numpy(dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            channels["eda_us"] = np.where(kohm > 0, 1000.0 / kohm, np.nan)
        notes.append("skin resistance (kOhm) converted to conductance (uS = 1000 / kOhm)")
    if "eda_us" not in channels:
        raise InputError(name, "has no skin conductance column", line=1, column="eda_us",
                         hint="give eda_us (uS) or eda_kohm (kOhm)")
    return Recording(time_s=time_s, channels=channels, source=path, notes=notes)


def read_table_recording(path: Path, cfg: SignalSettings) -> Recording:
    if path.suffix == ".parquet":
        df = pd.read_parquet(path)
    else:
        df = pd.read_csv(path)
    return _table_to_recording(df, path)


READERS: dict[str, Callable[[Path, SignalSettings], Recording]] = {
    ".parquet": read_table_recording,
    ".csv": read_table_recording,
}


def read_recording(path: Path, cfg: SignalSettings) -> Recording:
    """Read one recording file into a :class:`Recording` (sensor clock)."""
    for suffix, reader in READERS.items():
        if path.name.endswith(suffix):
            return reader(path, cfg)
    raise InputError(path.name, "is not a recording form screenweave reads",
                     hint=f"use one of {', '.join(READERS)}")
