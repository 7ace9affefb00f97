"""`screenweave report OUT`: rebuild charts, report page and deck from a finished run."""

from __future__ import annotations

from pathlib import Path

import typer

from pipeline.cli import app, guarded


@app.command()
@guarded
def report(
    out: Path = typer.Argument(..., help="The --out folder of a finished `screenweave run`."),
    session: str = typer.Option(
        None, "--session", metavar="PARTICIPANT/SESSION",
        help="Session drawn in the timeline chart (default: the one with the most typical "
             "switch rate)."),
) -> None:
    """Rebuild OUT/charts/, OUT/report.html and OUT/deck.pptx from the run's own files.

    Nothing is recomputed: the charts, the report and the deck are drawn from the
    tables the run wrote, so they can be rebuilt after a change of wording or colours
    without rerunning the pipeline.
    """
    from pipeline.report import build_report

    paths = build_report(out, session=session)
    charts = sum(1 for p in paths if p.suffix == ".png")
    typer.echo(f"{charts} charts in {out / 'charts'}")
    typer.echo(f"report: {out / 'report.html'}")
    typer.echo(f"deck:   {out / 'deck.pptx'}")
