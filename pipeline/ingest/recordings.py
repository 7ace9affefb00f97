"""Find and read each session's sensor recording (CONTRACT §1, signals/).

``find_recordings`` maps sessions to files; ``read_recording`` turns one file into a
:class:`~pipeline.types.Recording` on the sensor's own clock. Readers are chosen by
file form from :data:`READERS`:

* tables (``.parquet``, ``.csv``) with the contract's columns;
* EDF and EDF+ files (``.edf``, read with the maintained ``edfio`` library), their
  signal labels mapped to contract names by ``[signals.edf_labels]``; signals at
  different rates and discontinuous EDF+D records keep their own sample times;
* BIDS physiological recordings (``*_physio.tsv.gz`` with the ``.json`` sidecar
  giving SamplingFrequency, StartTime and Columns), columns mapped the same way.

Skin resistance (``eda_kohm``, or an EDA signal whose unit is a resistance) is
converted to conductance (µS = 1000 / kΩ).
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.config import SignalSettings
from pipeline.errors import InputError
from pipeline.types import Recording, SessionKey

TABLE_SUFFIXES = (".parquet", ".csv")
EDF_SUFFIXES = (".edf",)
BIDS_SUFFIX = "_physio.tsv.gz"
CHANNELS = ("eda_us", "hr_bpm", "acc_x", "acc_y", "acc_z", "resp", "ibi_ms")
#: Names a label may map to: the channels, plus skin resistance (converted).
MAPPABLE = CHANNELS + ("eda_kohm",)
STANDARD_GRAVITY = 9.80665  # m/s^2 per g (CGPM 1901)

# ------------------------------------------------------------------ finding


def _bids_entities(name: str) -> dict[str, str]:
    """key-value entities of a BIDS file name (``sub-01_ses-a_task-x_physio.tsv.gz``)."""
    stem = name.split(".", 1)[0]
    out = {}
    for part in stem.split("_"):
        if "-" in part:
            k, v = part.split("-", 1)
            out[k] = v
    return out


def find_recordings(signals_dir: Path, keys: list[SessionKey]) -> dict[SessionKey, Path]:
    """Map each session to its recording file.

    A file named ``{participant}__{session}.{parquet,csv,edf}`` wins; otherwise a BIDS
    recording ``sub-{participant}[_ses-{session}]..._physio.tsv.gz`` anywhere under
    ``signals_dir`` (without a ``ses`` entity it belongs to a participant with only
    one session). Two BIDS recordings for one session are an error.
    """
    found: dict[SessionKey, Path] = {}
    if not signals_dir.is_dir():
        return found
    for key in keys:
        for suffix in TABLE_SUFFIXES + EDF_SUFFIXES:
            path = signals_dir / f"{key.stem()}{suffix}"
            if path.is_file():
                found[key] = path
                break
            upper = signals_dir / f"{key.stem()}{suffix.upper()}"
            if suffix in EDF_SUFFIXES and upper.is_file():
                found[key] = upper
                break
    bids = sorted(p for p in signals_dir.rglob(f"*{BIDS_SUFFIX}") if p.is_file())
    if not bids:
        return found
    sessions_of: dict[str, list[SessionKey]] = {}
    for key in keys:
        sessions_of.setdefault(key.participant_id, []).append(key)
    claims: dict[SessionKey, list[Path]] = {}
    for path in bids:
        ent = _bids_entities(path.name)
        cands = sessions_of.get(ent.get("sub", ""), [])
        if "ses" in ent:
            cands = [k for k in cands if k.session_id == ent["ses"]]
        elif len(cands) != 1:
            cands = []
        for key in cands:
            claims.setdefault(key, []).append(path)
    for key, paths in claims.items():
        if key in found:
            continue
        if len(paths) > 1:
            raise InputError(paths[1].relative_to(signals_dir.parent).as_posix(),
                             f"is a second BIDS recording for session {key.label()} "
                             f"(also {paths[0].relative_to(signals_dir.parent).as_posix()})",
                             hint="keep one recording per session in signals/")
        found[key] = paths[0]
    return found


# ------------------------------------------------------------------ tables


def _kohm_to_us(kohm: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(kohm > 0, 1000.0 / kohm, np.nan)


def _check_time(time_s: np.ndarray, name: str,
                raw: pd.Series | np.ndarray | None = None) -> None:
    bad = ~np.isfinite(time_s)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise InputError(name, "is not a number", line=row + 2, column="time_s",
                         value=(raw.iloc[row] if isinstance(raw, pd.Series) else
                                time_s[row] if raw is None else raw[row]),
                         hint="time_s must be seconds")
    steps = np.diff(time_s)
    if (steps <= 0).any():
        row = int(np.flatnonzero(steps <= 0)[0]) + 1
        raise InputError(name, "does not increase", line=row + 2, column="time_s",
                         value=time_s[row], hint="time_s must be strictly increasing")


def _numbers(values: pd.Series | np.ndarray) -> np.ndarray:
    """A column as float64 (text that is not a number becomes NaN)."""
    if isinstance(values, np.ndarray) and values.dtype == np.float64:
        return values
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)


def _table_to_recording(df: pd.DataFrame | dict[str, np.ndarray], path: Path) -> Recording:
    """A recording from a table's columns (a DataFrame, or float64 arrays by name)."""
    name = path.name
    columns = list(df.keys())
    if "time_s" not in columns:
        raise InputError(name, "has no time_s column", line=1, column="time_s",
                         hint="a signal table needs time_s (seconds) and eda_us or eda_kohm")
    time_s = _numbers(df["time_s"])
    _check_time(time_s, name, df["time_s"])
    channels: dict[str, np.ndarray] = {}
    notes: list[str] = []
    for col in CHANNELS:
        if col in columns:
            channels[col] = _numbers(df[col])
    if "eda_us" not in channels and "eda_kohm" in columns:
        channels["eda_us"] = _kohm_to_us(_numbers(df["eda_kohm"]))
        notes.append("skin resistance (kOhm) converted to conductance (uS = 1000 / kOhm)")
    if "eda_us" not in channels:
        raise InputError(name, "has no skin conductance column", line=1, column="eda_us",
                         hint="give eda_us (uS) or eda_kohm (kOhm)")
    return Recording(time_s=time_s, channels=channels, source=path, notes=notes)


def _numeric_parquet(path: Path) -> dict[str, np.ndarray] | None:
    """The columns of a Parquet recording as float64 arrays (nulls as NaN), straight
    from Arrow; None when some column is not numeric (read through pandas instead,
    which turns text into NaN per cell). Skips building a DataFrame: about 5 ms of
    a 4-hour, 32 Hz recording's 25 ms read."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pq.read_table(path)
    if not all(pa.types.is_integer(f.type) or pa.types.is_floating(f.type)
               for f in table.schema):
        return None
    out = {}
    for name in table.column_names:
        column = table.column(name).combine_chunks().cast(pa.float64())
        if column.null_count:
            column = column.fill_null(np.nan)
        out[name] = column.to_numpy(zero_copy_only=False)
    return out


def read_table_recording(path: Path, cfg: SignalSettings) -> Recording:
    if path.suffix == ".parquet":
        df = _numeric_parquet(path)
        if df is None:
            df = pd.read_parquet(path)
    else:
        df = pd.read_csv(path)
    return _table_to_recording(df, path)


# ------------------------------------------------------------------ labels and units


def _channel_for(label: str, cfg: SignalSettings) -> str | None:
    """The contract name a signal label or column maps to (None: not used)."""
    clean = label.strip()
    mapping = {k.strip().lower(): v for k, v in cfg.edf_labels.items()}
    if clean in cfg.edf_labels:
        return cfg.edf_labels[clean]
    if clean.lower() in mapping:
        return mapping[clean.lower()]
    if clean.lower() in MAPPABLE:
        return clean.lower()
    return None


def _unit_key(unit: str) -> str:
    u = unit.strip().replace("µ", "u").replace("μ", "u").replace("Ω", "ohm")
    return re.sub(r"[\s_]", "", u)


#: Conductance units -> factor to µS (a unit on an EDA signal, so "mS" is millisiemens).
CONDUCTANCE = {"us": 1.0, "microsiemens": 1.0, "ns": 1e-3, "nanosiemens": 1e-3,
               "ms": 1e3, "millisiemens": 1e3, "s": 1e6, "siemens": 1e6}
#: Resistance units -> factor to kΩ ("Mohm" is megaohm: skin resistance is kΩ to MΩ).
RESISTANCE = {"kohm": 1.0, "kiloohm": 1.0, "ohm": 1e-3, "mohm": 1e3, "megaohm": 1e3}


def _eda_from(values: np.ndarray, unit: str, mapped: str, where: str,
              notes: list[str]) -> np.ndarray:
    """Skin conductance in µS from a signal mapped to eda_us or eda_kohm.

    Without a unit, eda_us is taken as µS and eda_kohm as kΩ; with one, the unit
    decides (a resistance unit is converted whichever name the label maps to).
    """
    key = _unit_key(unit).lower()
    if key in CONDUCTANCE and mapped == "eda_us":
        return values * CONDUCTANCE[key]
    if key in RESISTANCE or (key == "" and mapped == "eda_kohm"):
        factor = RESISTANCE.get(key, 1.0)
        notes.append(f"{where}: skin resistance ({unit.strip() or 'kOhm'}) converted to "
                     "conductance (uS = 1000 / kOhm)")
        return _kohm_to_us(values * factor)
    if key == "":
        return values
    raise InputError(where, f"has unit {unit.strip()!r}, which is not a skin "
                     f"{'resistance' if mapped == 'eda_kohm' else 'conductance'} unit",
                     column=mapped, value=unit,
                     hint="map this label to eda_us (conductance: uS, nS) or eda_kohm "
                     "(resistance: kOhm, Ohm)")


def _convert(values: np.ndarray, unit: str, mapped: str, where: str,
             notes: list[str]) -> tuple[str, np.ndarray]:
    """(contract channel, values in the contract unit) for one mapped signal."""
    if mapped in ("eda_us", "eda_kohm"):
        return "eda_us", _eda_from(values, unit, mapped, where, notes)
    key = _unit_key(unit).lower()
    if mapped == "ibi_ms" and key == "s":
        return mapped, values * 1000.0
    if mapped.startswith("acc_") and key in ("m/s2", "m/s^2", "ms-2", "m.s-2", "m/s/s"):
        return mapped, values / STANDARD_GRAVITY
    return mapped, values


def _merge_channels(parts: list[tuple[str, np.ndarray, np.ndarray]]
                    ) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """One time axis for channels sampled at their own times (NaN where a channel has
    no sample)."""
    if len({p[1].size for p in parts}) == 1 and all(
            np.array_equal(parts[0][1], p[1]) for p in parts[1:]):
        return parts[0][1], {name: vals for name, _, vals in parts}
    # times on a microsecond lattice so that equal times from different rates coincide
    keyed = [np.round(t * 1e6).astype(np.int64) for _, t, _ in parts]
    union = np.unique(np.concatenate(keyed))
    channels = {}
    for (name, _, vals), k in zip(parts, keyed):
        arr = np.full(union.size, np.nan)
        arr[np.searchsorted(union, k)] = vals
        channels[name] = arr
    return union / 1e6, channels


# ------------------------------------------------------------------ EDF


def _edf_record_onsets(edf) -> np.ndarray | None:
    """Onset (s) of every data record of a discontinuous EDF+D file; None if continuous."""
    if edf.is_continuous:
        return None
    from edfio.edf_annotations import _get_data_record_onset  # EDF+ timekeeping TALs

    keeper = edf._timekeeping_signal
    records = keeper.digital.reshape((-1, keeper._bytes_per_data_record))
    return np.array([float(_get_data_record_onset(r)) for r in records])


def read_edf_recording(path: Path, cfg: SignalSettings) -> Recording:
    """An EDF or EDF+ file as a recording (edfio; labels mapped by [signals.edf_labels])."""
    import edfio

    name = path.name
    edf = edfio.read_edf(path)
    onsets = _edf_record_onsets(edf)
    record_s = float(edf.data_record_duration)
    notes: list[str] = []
    parts: list[tuple[str, np.ndarray, np.ndarray]] = []
    seen: list[str] = []
    for sig in edf.signals:
        label = sig.label.strip()
        seen.append(label)
        mapped = _channel_for(label, cfg)
        if mapped is None:
            continue
        if mapped not in MAPPABLE:
            raise InputError(name, f"[signals.edf_labels] maps {label!r} to {mapped!r}, which "
                             "is not a recording channel", column=label, value=mapped,
                             hint=f"map labels to one of {', '.join(MAPPABLE)}")
        fs = float(sig.sampling_frequency)
        data = np.asarray(sig.data, dtype=float)
        if onsets is None:
            t = np.arange(data.size) / fs
        else:
            per = int(round(fs * record_s))
            t = (onsets[:, None] + np.arange(per)[None, :] / fs).ravel()[: data.size]
        channel, values = _convert(data, sig.physical_dimension, mapped, f"{name} ({label})",
                                   notes)
        if any(p[0] == channel for p in parts):
            raise InputError(name, f"has two signals for {channel}", column=label,
                             hint="map only one EDF label to each channel")
        parts.append((channel, t, values))
    if not any(p[0] == "eda_us" for p in parts):
        raise InputError(name, "has no skin conductance signal", column="eda_us",
                         value=", ".join(seen) or "(none)",
                         hint="map its EDA label in study.toml, e.g. [signals.edf_labels] "
                         "GSR = \"eda_us\" (or \"eda_kohm\" for resistance)")
    if onsets is not None:
        notes.append(f"discontinuous EDF+ ({len(onsets)} data records with their own onsets)")
    time_s, channels = _merge_channels(parts)
    _check_time(time_s, name)
    return Recording(time_s=time_s, channels=channels, source=path, notes=notes)


# ------------------------------------------------------------------ BIDS physio


def bids_sidecar(path: Path) -> Path | None:
    """The JSON sidecar of a BIDS physio file: beside it, or higher up by the BIDS
    inheritance principle (a ``*_physio.json`` whose entities the file has too)."""
    own = path.with_name(path.name[: -len(".tsv.gz")] + ".json")
    if own.is_file():
        return own
    ent = _bids_entities(path.name)
    for folder in path.parents:
        for cand in sorted(folder.glob("*physio.json")):
            cent = _bids_entities(cand.name)
            if all(ent.get(k) == v for k, v in cent.items()):
                return cand
        if (folder / "dataset_description.json").is_file():
            break
    return None


def read_bids_physio(path: Path, cfg: SignalSettings) -> Recording:
    """A BIDS ``*_physio.tsv.gz`` recording (no header row; columns from the sidecar)."""
    name = path.name
    sidecar = bids_sidecar(path)
    if sidecar is None:
        raise InputError(name, "has no JSON sidecar",
                         hint=f"put {name[: -len('.tsv.gz')]}.json beside it with "
                         "SamplingFrequency, StartTime and Columns")
    try:
        meta = json.loads(sidecar.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as err:
        raise InputError(sidecar.name, f"is not valid JSON ({err})") from None
    for field in ("SamplingFrequency", "StartTime", "Columns"):
        if field not in meta:
            raise InputError(sidecar.name, f"has no {field}", column=field,
                             hint="a BIDS physio sidecar needs SamplingFrequency, StartTime "
                             "and Columns")
    fs = meta["SamplingFrequency"]
    if not isinstance(fs, (int, float)) or not fs > 0:
        raise InputError(sidecar.name, "is not a positive number", column="SamplingFrequency",
                         value=fs)
    columns = meta["Columns"]
    if not isinstance(columns, list) or not all(isinstance(c, str) for c in columns):
        raise InputError(sidecar.name, "is not a list of column names", column="Columns",
                         value=columns)
    table = pd.read_csv(path, sep="\t", header=None, compression="gzip",
                        na_values=["n/a"], dtype=float)
    if table.shape[1] != len(columns):
        raise InputError(name, f"has {table.shape[1]} columns but its sidecar names "
                         f"{len(columns)}", line=1, value=", ".join(columns),
                         hint="Columns in the sidecar must list every column, in order")
    n = len(table)
    time_s = float(meta["StartTime"]) + np.arange(n) / float(fs)
    notes: list[str] = []
    channels: dict[str, np.ndarray] = {}
    for i, col in enumerate(columns):
        mapped = _channel_for(col, cfg)
        if mapped is None or mapped not in MAPPABLE:
            continue
        unit = ""
        desc = meta.get(col)
        if isinstance(desc, dict):
            unit = str(desc.get("Units", ""))
        channel, values = _convert(table.iloc[:, i].to_numpy(dtype=float), unit, mapped,
                                   f"{name} ({col})", notes)
        channels[channel] = values
    if "eda_us" not in channels:
        raise InputError(sidecar.name, "names no skin conductance column", column="Columns",
                         value=", ".join(columns),
                         hint="name it eda_us (or eda_kohm), or map it in study.toml: "
                         "[signals.edf_labels] gsr = \"eda_us\"")
    return Recording(time_s=time_s, channels=channels, source=path, notes=notes)


READERS: dict[str, Callable[[Path, SignalSettings], Recording]] = {
    ".parquet": read_table_recording,
    ".csv": read_table_recording,
    ".edf": read_edf_recording,
    BIDS_SUFFIX: read_bids_physio,
}


def read_recording(path: Path, cfg: SignalSettings) -> Recording:
    """Read one recording file into a :class:`Recording` (sensor clock)."""
    lower = path.name.lower()
    for suffix, reader in READERS.items():
        if lower.endswith(suffix):
            return reader(path, cfg)
    raise InputError(path.name, "is not a recording form screenweave reads",
                     hint=f"use one of {', '.join(READERS)}")
