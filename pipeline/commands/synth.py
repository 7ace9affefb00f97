"""`screenweave synth OUT`: write a synthetic study with known truth (synthetic_diaries)."""

from __future__ import annotations

import shutil
import time
from pathlib import Path

import typer

from pipeline.cli import app, guarded
from pipeline.errors import InputError


def _size(path: Path) -> int:
    if path.is_file():
        return path.stat().st_size
    return sum(f.stat().st_size for f in path.rglob("*") if f.is_file())


@app.command()
@guarded
def synth(
    out: Path = typer.Argument(..., help="Folder to write the study into (created if missing)."),
    config: Path = typer.Option(None, "--config", "-c",
                                help="TOML file of generator options (synthetic_diaries "
                                "SynthOptions); the flags below override it."),
    participants_per_cohort: int = typer.Option(None, "--participants-per-cohort", min=1,
                                                help="Participants in each cohort."),
    sessions: int = typer.Option(None, "--sessions", min=1,
                                 help="Sessions (evenings) per participant."),
    hours: float = typer.Option(None, "--hours", min=0.01, help="Mean session length (hours)."),
    rate_hz: float = typer.Option(None, "--rate-hz", min=0.1,
                                  help="Sensor sampling rate (Hz)."),
    seed: int = typer.Option(None, "--seed", min=0, help="Random seed (same seed, same bytes)."),
    artifacts: bool = typer.Option(None, "--artifacts/--no-artifacts",
                                   help="Inject recording artifacts (--no-artifacts: a clean "
                                   "recording)."),
    drift_ppm: float = typer.Option(None, "--drift-ppm", help="Mean sensor clock drift (ppm)."),
    offset_s: float = typer.Option(None, "--offset-s",
                                   help="Mean sensor-clock time at video second 0 (s)."),
    uncoded: bool = typer.Option(None, "--uncoded/--no-uncoded",
                                 help="Leave stretches uncoded (missing media-log rows)."),
    double_coded_share: float = typer.Option(None, "--double-coded-share", min=0.0, max=1.0,
                                             help="Share of sessions coded by a second coder."),
    force: bool = typer.Option(False, "--force",
                               help="Write into a non-empty folder, replacing a previous "
                               "study's files."),
) -> None:
    """Generate an invented study (roster, sessions, media log, signals, sync, survey)
    together with truth/ (what was really generated), for demos, tests and power checks."""
    from synthetic_diaries.generator import STUDY_FILES, generate_study
    from synthetic_diaries.options import load_options, options_from_dict

    base = load_options(config) if config is not None else options_from_dict({})
    data = base.model_dump()
    top = {"participants_per_cohort": participants_per_cohort,
           "sessions_per_participant": sessions, "session_hours": hours,
           "sampling_rate_hz": rate_hz, "seed": seed}
    data.update({k: v for k, v in top.items() if v is not None})
    if drift_ppm is not None:
        data["clock"]["drift_ppm"] = drift_ppm
    if offset_s is not None:
        data["clock"]["offset_s"] = offset_s
    if double_coded_share is not None:
        data["coding"]["double_coded_share"] = double_coded_share
    if uncoded is False:
        data["uncoded"]["rate_per_hour"] = 0.0
    opts = options_from_dict(data, "screenweave synth options")
    if artifacts is False:
        opts = opts.model_copy(update={"artifacts": opts.artifacts.without()})

    if out.exists() and not out.is_dir():
        raise InputError(str(out), "is a file, not a folder", hint="name a folder to write into")
    if out.is_dir() and any(out.iterdir()):
        if not force:
            raise InputError(str(out), "is not empty; refusing to write into it",
                             hint="name a new or empty folder, or add --force to replace "
                             "a previous synthetic study there")
        for name in STUDY_FILES:
            old = out / name
            if old.is_dir():
                shutil.rmtree(old)
            elif old.exists():
                old.unlink()

    began = time.perf_counter()
    generate_study(out, opts)
    took = time.perf_counter() - began

    n_part = opts.participants_per_cohort * len(opts.cohorts)
    n_sess = n_part * opts.sessions_per_participant
    typer.echo(f"wrote a synthetic study to {out} in {took:.1f} s: {len(opts.cohorts)} cohorts "
               f"({', '.join(c.name for c in opts.cohorts)}), {n_part} participants, "
               f"{n_sess} sessions of about {opts.session_hours:g} h at "
               f"{opts.sampling_rate_hz:g} Hz, seed {opts.seed}")
    for name in STUDY_FILES:
        path = out / name
        if not path.exists():
            continue
        what = f"{len(list(path.iterdir()))} files" if path.is_dir() else "file"
        typer.echo(f"  {name + ('/' if path.is_dir() else ''):<14} {what:<10} "
                   f"{_size(path) / 1e6:8.2f} MB")
    typer.echo(f"  total {sum(_size(out / n) for n in STUDY_FILES if (out / n).exists()) / 1e6:.2f}"
               " MB; truth/ is for checking results and is not read by `screenweave run`")
