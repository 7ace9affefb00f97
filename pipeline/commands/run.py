"""`screenweave run STUDY --out OUT`: the whole job, study folder to findings."""

from __future__ import annotations

from pathlib import Path

import typer

from pipeline.cli import app, guarded
from pipeline.errors import EXIT_PARTIAL


@app.command()
@guarded
def run(
    study: Path = typer.Argument(..., help="Study folder, or a .toml whose [study] data_dir "
                                 "names one."),
    out: Path = typer.Option(..., "--out", "-o", help="Output folder (created if missing)."),
    workers: int = typer.Option(0, "--workers", "-w",
                                help="Parallel processes for per-session work; 0 = all cores."),
    cluster: str = typer.Option(None, "--cluster",
                                help="Address of a running Dask scheduler to run the "
                                "per-session work on (needs the screenweave\\[dask] extra)."),
    keep_going: bool = typer.Option(False, "--keep-going",
                                    help="Run the other sessions when one fails, list every "
                                    "failure, and exit with status 4 (partial success)."),
    fresh: bool = typer.Option(False, "--fresh", help="Ignore cached per-session results."),
    no_report: bool = typer.Option(False, "--no-report",
                                   help="Skip charts, report page and deck."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress bar."),
) -> None:
    """Validate, process and analyse a study; write tables, charts, report and deck."""
    from pipeline.execution import default_workers, start_worker_server

    n = workers if workers > 0 else default_workers()
    if n > 1 and not cluster:
        # the workers' fork server imports the stage modules on one core while this
        # process imports pandas and reads the study on another
        start_worker_server()
    from pipeline.runner import run_study

    result = run_study(study, out, workers=n, cluster=cluster, keep_going=keep_going,
                       fresh=fresh, quiet=quiet, report=not no_report)
    for line in result.summary:
        typer.echo(line)
    for f in result.failures:
        typer.secho(f"failed: {f['participant_id']}/{f['session_id']} [{f['stage']}] "
                    f"{f['error']}" + (f" (hint: {f['hint']})" if f["hint"] else ""),
                    err=True, fg="yellow")
    typer.echo(f"wrote {result.out}")
    if result.partial:
        typer.secho(f"partial success: ran {result.sessions_ok} of {result.sessions_total} "
                    "sessions", err=True, fg="yellow")
        raise typer.Exit(code=EXIT_PARTIAL)
