"""Signal files of a study: which session each belongs to, and reading them safely.

Finding and reading recordings is :mod:`pipeline.ingest.recordings`' job; here we
report what it leaves over (a session without recording, a file no session claims)
and turn any failure to read a file into an :class:`InputError` naming that file.
"""

from __future__ import annotations

from pathlib import Path

from pipeline.config import SignalSettings
from pipeline.errors import InputError, Problem
from pipeline.ingest.recordings import find_recordings, read_recording
from pipeline.types import Recording, SessionKey

#: Files a BIDS folder holds beside the recordings; never reported as unmatched.
BIDS_METADATA = ("dataset_description.json", "participants.tsv", "participants.json",
                 "README", "README.md", "CHANGES", ".bidsignore")


def _stem(path: Path) -> str:
    return path.name.split(".", 1)[0]


def find_signal_files(root: Path, keys: list[SessionKey],
                      warnings: list[str]) -> dict[SessionKey, Path]:
    """Each session's recording; warn about sessions without one and files left over."""
    signals = root / "signals"
    if not signals.is_dir():
        warnings.append("signals/: no such folder; no session has a sensor recording")
        return {}
    found = find_recordings(signals, keys)
    missing = [k for k in keys if k not in found]
    if missing:
        shown = ", ".join(k.label() for k in missing[:10])
        more = f" and {len(missing) - 10} more" if len(missing) > 10 else ""
        warnings.append(f"signals/: {len(missing)} session(s) have no recording "
                        f"({shown}{more}); they are analysed without sensor data")
    used = {_stem(p) for p in found.values()}
    by_stem = {k.stem(): k for k in keys}
    for path in sorted(p for p in signals.rglob("*") if p.is_file()):
        rel = path.relative_to(root).as_posix()
        if any(part.startswith(".") for part in path.relative_to(signals).parts):
            continue
        if path.name in BIDS_METADATA or _stem(path) in used:
            continue
        key = by_stem.get(_stem(path))
        if key is not None:
            warnings.append(f"{rel}: named for session {key.label()} but not used: "
                            "its form is not one screenweave reads here")
        else:
            warnings.append(f"{rel}: matches no session of sessions.csv; ignored "
                            "(recordings are named participant__session.parquet or .csv)")
    return found


def read_recording_checked(path: Path, cfg: SignalSettings, label: str | None = None) -> Recording:
    """:func:`read_recording`, with every failure an :class:`InputError` naming the file.

    ``label`` is how messages name the file (default: its name).
    """
    label = label or path.name
    try:
        return read_recording(path, cfg)
    except InputError as err:
        problems = [Problem(label if p.file == path.name else p.file, p.problem, p.line,
                            p.column, p.value, p.hint) for p in err.problems]
        raise InputError.from_problems(problems) from None
    except MemoryError:
        raise
    except Exception as err:  # a reader library failing on a damaged file
        detail = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise InputError(label, f"cannot be read as a recording ({detail})",
                         hint="the file may be truncated or not what its name says; export "
                         "it again (time_s and eda_us columns)") from None
