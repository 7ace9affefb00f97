"""Ingest stage: read and check a study folder (CONTRACT §1) into a :class:`Study`.

Entry point: :func:`load_study`. Every file is only read, never written. Each file is
checked in full and all of its problems are raised together as one
:class:`~pipeline.errors.InputError` (file, line, column, value, what is allowed).
Roster and sessions are checked first (the other files refer to them); then the
media log, sync and survey files are checked together.

The modules, one per file of the study folder: :mod:`.csvfile` (robust CSV reading),
:mod:`.cells` and :mod:`.ids` (per-cell rules), :mod:`.roster`, :mod:`.sessions`,
:mod:`.media_log`, :mod:`.sync`, :mod:`.survey`, :mod:`.signal_files` (with
:mod:`.recordings`, which reads sensor files).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from pipeline.config import Config
from pipeline.errors import InputError, ProblemCollector
from pipeline.ingest import roster as roster_file
from pipeline.ingest import sessions as sessions_file
from pipeline.ingest import survey as survey_file
from pipeline.ingest import sync as sync_file
from pipeline.ingest.csvfile import read_table
from pipeline.ingest.media_log import read_media_log, session_runs
from pipeline.ingest.signal_files import find_signal_files, read_recording_checked
from pipeline.types import SessionKey, Study, session_keys

__all__ = ["load_study", "read_study_head", "read_study_rest", "StudyHead",
           "read_recording_checked"]


def _read(path: Path, label: str, required: list[str], problems: ProblemCollector,
          allow_no_rows: bool = False):
    try:
        return read_table(path, label, required, allow_no_rows=allow_no_rows)
    except InputError as err:
        problems.extend(err.problems)
        return None


def _vocabulary(cfg: Config) -> dict[str, str] | None:
    if cfg.platforms is None or not cfg.platforms.groups:
        return None
    return dict(cfg.platforms.groups)


@dataclass
class StudyHead:
    """What a run needs before the media log: roster, sessions, sync and recordings.

    The runner starts the signal work of every session from this (the recordings do
    not depend on the media codes) and reads the media log meanwhile
    (:func:`read_study_rest`). Problems found in sync.csv are held, not raised, so that
    they are listed together with the media log's.
    """

    folder: Path
    roster: pd.DataFrame
    sessions: pd.DataFrame
    sync: pd.DataFrame
    recordings: dict[SessionKey, Path]
    #: roster.csv and sessions.csv
    inputs: list[Path]
    #: warnings of roster.csv and sessions.csv
    warnings: list[str]
    sync_warnings: list[str]
    recording_warnings: list[str]
    sync_problems: ProblemCollector

    @property
    def ok(self) -> bool:
        """True when nothing read so far has a problem."""
        return not self.sync_problems

    def session_keys(self) -> list[SessionKey]:
        return session_keys(self.sessions)


def load_study(folder: Path, cfg: Config) -> Study:
    """Read and check the study folder ``folder`` with the resolved configuration
    (:func:`read_study_head`, then :func:`read_study_rest`).

    Parameters
    ----------
    folder
        The study folder, as returned by :func:`pipeline.config.resolve_study`.
    cfg
        The resolved configuration (``[study] timezone``, ``[platforms]``, ``[survey]``).

    Returns
    -------
    Study
        Every table checked and typed; warnings for what is allowed but worth a look.

    Raises
    ------
    InputError
        All problems found, each naming file, line, column and value.
    """
    return read_study_rest(read_study_head(folder, cfg), cfg)


def read_study_head(folder: Path, cfg: Config) -> StudyHead:
    """Read and check roster.csv and sessions.csv (raising their problems), sync.csv
    (holding its problems) and find each session's recording."""
    folder = Path(folder)
    warnings: list[str] = []
    problems = ProblemCollector()
    inputs: list[Path] = []

    # roster and sessions first: everything else refers to them
    roster_path, sessions_path = folder / "roster.csv", folder / "sessions.csv"
    roster = sessions = None
    known_participants: set[str] = set()
    for path in (roster_path, sessions_path):
        if not path.is_file():
            problems.add(path.name, "is missing from the study folder",
                         hint=f"{folder} needs roster.csv and sessions.csv (see "
                         "docs/study-format.md)")
    if roster_path.is_file():
        inputs.append(roster_path)
        table = _read(roster_path, "roster.csv", roster_file.REQUIRED, problems)
        if table is not None:
            roster = roster_file.validate_roster(table, problems)
            known_participants = set(table.frame["participant_id"]) - {""}
    if sessions_path.is_file():
        inputs.append(sessions_path)
        table = _read(sessions_path, "sessions.csv", sessions_file.REQUIRED, problems)
        if table is not None:
            sessions = sessions_file.validate_sessions(table, known_participants, cfg.study,
                                                       problems, warnings)
    problems.raise_if_any()
    if roster is None or sessions is None:  # unreachable: a missing table is a problem above
        raise InputError("roster.csv", "could not be read")

    sync = sync_file.empty_sync()
    sync_warnings: list[str] = []
    sync_problems = ProblemCollector()
    if not (folder / "sync.csv").is_file():
        sync_warnings.append("sync.csv: not given; every session is aligned at zero (video "
                             "second 0 = sensor second 0) and flagged in QC")
    else:
        table = _read(folder / "sync.csv", "sync.csv", sync_file.REQUIRED, sync_problems,
                      allow_no_rows=True)
        if table is not None:
            sync = sync_file.validate_sync(table, sessions, sync_problems)
            if not len(table):
                sync_warnings.append("sync.csv: has no rows; every session is aligned at "
                                     "zero and flagged in QC")
    keys = session_keys(sessions)
    recording_warnings: list[str] = []
    recordings = find_signal_files(folder, keys, recording_warnings)
    return StudyHead(folder=folder, roster=roster, sessions=sessions, sync=sync,
                     recordings=recordings, inputs=inputs, warnings=warnings,
                     sync_warnings=sync_warnings, recording_warnings=recording_warnings,
                     sync_problems=sync_problems)


def read_study_rest(head: StudyHead, cfg: Config) -> Study:
    """Read and check the media log and survey.csv; raise every problem found in them
    and in sync.csv together; return the whole :class:`Study`."""
    folder, roster, sessions, sync = head.folder, head.roster, head.sessions, head.sync
    warnings = list(head.warnings)
    problems = ProblemCollector()
    inputs = list(head.inputs)

    declared = _vocabulary(cfg)
    media_log, seen, log_files = read_media_log(
        folder, sessions, set(declared) if declared is not None else None, problems, warnings)
    inputs.extend(log_files)
    if (folder / "sync.csv").is_file():
        inputs.append(folder / "sync.csv")
    problems.extend(head.sync_problems.problems)
    warnings.extend(head.sync_warnings)

    survey = None
    if (folder / "survey.csv").is_file():
        inputs.append(folder / "survey.csv")
        table = _read(folder / "survey.csv", "survey.csv", survey_file.REQUIRED, problems,
                      allow_no_rows=True)
        if table is not None:
            survey = survey_file.validate_survey(table, set(roster["participant_id"]),
                                                 cfg.survey, problems, warnings)
            if not len(table):
                warnings.append("survey.csv: has no rows; no survey item is analysed")
    problems.raise_if_any()

    if declared is None:
        platform_groups = {code: "ungrouped" for code in sorted(seen)}
        warnings.append(f"no [platforms] vocabulary declared: every code seen is accepted "
                        f"({len(seen)}: {', '.join(sorted(seen)) or 'none'})")
    else:
        platform_groups = declared

    primary = cfg.coding.primary_coder
    coders = sorted(media_log["coder"].unique())
    if primary is not None and primary not in coders:
        close = difflib.get_close_matches(primary, coders, n=1)
        warnings.append(f"[coding] primary_coder = {primary!r} codes no session"
                        + (f"; did you mean {close[0]!r}?" if close else "")
                        + f" (coders in the media log: {', '.join(repr(c) for c in coders)}); "
                        "the first coder in sorted order is used")

    recordings = head.recordings
    warnings.extend(head.recording_warnings)
    inputs.extend(recordings[k] for k in head.session_keys() if k in recordings)
    _coverage_warnings(roster, sessions, media_log, sync, warnings)
    return Study(root=folder, roster=roster, sessions=sessions, media_log=media_log,
                 sync=sync, survey=survey, recordings=recordings,
                 platform_groups=platform_groups, vocabulary_declared=declared is not None,
                 input_files=inputs, warnings=warnings)


def _coverage_warnings(roster: pd.DataFrame, sessions: pd.DataFrame, media_log: pd.DataFrame,
                       sync: pd.DataFrame, warnings: list[str]) -> None:
    without = sorted(set(roster["participant_id"]) - set(sessions["participant_id"]))
    if without:
        warnings.append(f"roster.csv: {len(without)} participant(s) have no session: "
                        f"{', '.join(without[:10])}{' ...' if len(without) > 10 else ''}")
    keys = ["participant_id", "session_id"]
    coded = set(session_runs(media_log))
    uncoded = [f"{p}/{s}" for p, s in sessions[keys].itertuples(index=False, name=None)
               if (p, s) not in coded]
    if uncoded:
        warnings.append(f"media log: {len(uncoded)} session(s) have no coded second: "
                        f"{', '.join(uncoded[:10])}{' ...' if len(uncoded) > 10 else ''}")
    synced = set(sync[keys].drop_duplicates().itertuples(index=False, name=None))
    unsynced = [f"{p}/{s}" for p, s in sessions[keys].itertuples(index=False, name=None)
                if (p, s) not in synced]
    if unsynced and len(sync):
        warnings.append(f"sync.csv: {len(unsynced)} session(s) have no sync event and are "
                        f"aligned at zero: {', '.join(unsynced[:10])}"
                        f"{' ...' if len(unsynced) > 10 else ''}")
