"""`screenweave check STUDY`: validate a study folder and summarise it; writes nothing."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from pipeline.cli import app, guarded
from pipeline.errors import InputError, Problem

if TYPE_CHECKING:  # imported by the functions that use them: the command line starts
    from pipeline.config import Config  # without pandas and pydantic
    from pipeline.types import Recording, SessionKey, Study


def _rate(rec: Recording) -> str:
    import numpy as np

    rate = rec.sampling_rate_hz
    return "rate unknown" if not np.isfinite(rate) else f"{rate:.4g} Hz"


def read_recordings(study: Study, cfg: Config) -> tuple[dict[SessionKey, Recording],
                                                        list[Problem]]:
    """Read every recording of the study; unreadable files become problems."""
    from pipeline.ingest import read_recording_checked

    records: dict[SessionKey, Recording] = {}
    problems: list[Problem] = []
    for key, path in study.recordings.items():
        label = path.relative_to(study.root).as_posix()
        try:
            records[key] = read_recording_checked(path, cfg.signals, label)
        except InputError as err:
            problems.extend(err.problems)
    return records, problems


def summary_lines(study: Study, cfg: Config, config_file: Path | None,
                  records: dict[SessionKey, Recording]) -> list[str]:
    """The text `check` prints: what the study holds, per session, and its warnings."""
    roster, sessions, log = study.roster, study.sessions, study.media_log
    cohorts = roster["cohort"].value_counts().sort_index()
    keys = ["participant_id", "session_id"]
    # observed=True: the log's ID columns are categorical (only the pairs present wanted)
    coded = log[keys + ["second"]].drop_duplicates().groupby(keys, observed=True).size()
    total_s = int(sessions["duration_s"].sum())
    coded_s = int(coded.sum())
    lines = [
        f"study: {cfg.study.name} ({study.root})",
        f"settings: {config_file if config_file else 'defaults (no study.toml)'}",
        f"participants: {len(roster)} ("
        + ", ".join(f"{c}: {n}" for c, n in cohorts.items()) + ")",
        f"sessions: {len(sessions)}, {total_s / 3600:.2f} hours",
        f"coded hours: {coded_s / 3600:.2f} ({coded_s} of {total_s} session seconds "
        f"coded by at least one coder, {100 * coded_s / max(total_s, 1):.1f} %)",
    ]
    seen = sorted(set(";".join(log["in_view"].unique()).split(";")) - {""})
    if study.vocabulary_declared:
        lines.append(f"platforms seen: {', '.join(seen) or 'none'} (vocabulary declared in "
                     f"[platforms]: {', '.join(sorted(study.platform_groups))})")
    else:
        lines.append(f"platforms seen: {', '.join(seen) or 'none'} (no [platforms] vocabulary "
                     "declared: every code accepted)")
    lines.append(f"signals: {len(study.recordings)} of {len(sessions)} sessions have a "
                 "recording")
    if study.survey is not None:
        lines.append(f"survey: {len(study.survey)} responses, items: "
                     f"{', '.join(sorted(study.survey['item'].unique()))}")
    pairs = study.sync.groupby(keys).size()
    lines.append("per session:")
    for key in study.session_keys():
        idx = (key.participant_id, key.session_id)
        row = sessions[(sessions.participant_id == key.participant_id)
                       & (sessions.session_id == key.session_id)].iloc[0]
        coders = study.coders(key)
        named = ", ".join(c if c else "(unnamed)" for c in coders) or "none"
        rec = records.get(key)
        if rec is not None:
            signal = f"{', '.join(sorted(rec.channels))} at {_rate(rec)}, {len(rec.time_s)} samples"
        elif key in study.recordings:
            signal = "recording unreadable"
        else:
            signal = "no recording"
        lines.append(f"  {key.label()}: {int(row['duration_s'])} s, coded {int(coded.get(idx, 0))}"
                     f" s, coders: {named}, sync pairs: {int(pairs.get(idx, 0))}, "
                     f"signal: {signal}")
    warnings = list(study.warnings) + _recording_warnings(study, records)
    if warnings:
        lines.append(f"warnings ({len(warnings)}):")
        lines.extend(f"  - {w}" for w in warnings)
    return lines


def _recording_warnings(study: Study, records: dict[SessionKey, Recording]) -> list[str]:
    import numpy as np

    out = []
    for key, rec in records.items():
        label = study.recordings[key].relative_to(study.root).as_posix()
        if len(rec.time_s) == 0:
            out.append(f"{label}: holds no samples")
            continue
        eda = rec.channels.get("eda_us")
        if eda is not None and not np.isfinite(eda).any():
            out.append(f"{label}: eda_us has no finite value; the session has no usable skin "
                       "conductance")
        out.extend(f"{label}: {note}" for note in rec.notes)
    return out


@app.command()
@guarded
def check(
    study: Path = typer.Argument(..., metavar="STUDY",
                                 help="Study folder, or a study .toml whose data_dir setting "
                                 "names the folder."),
) -> None:
    """Check a study folder against the data contract and summarise it (writes nothing).

    Exit status 0 when the study is valid, 2 when a file or setting is refused.
    """
    from pipeline.config import resolve_study
    from pipeline.ingest import load_study

    folder, cfg, config_file = resolve_study(study)
    loaded = load_study(folder, cfg)
    records, problems = read_recordings(loaded, cfg)
    for line in summary_lines(loaded, cfg, config_file, records):
        typer.echo(line)
    if problems:
        raise InputError.from_problems(problems)
    typer.echo("study is valid")
