"""Rebuild a finished run's report after a later command added tables to it."""

from __future__ import annotations

from pathlib import Path


def refresh_if_run(out: Path) -> list[Path]:
    """If ``out`` holds a finished run (its manifest.json), rebuild charts, page and deck.

    `agree` and `power` write into a run folder; this keeps report.html and deck.pptx
    in step with the tables now there. Returns the files written (none when ``out``
    is not a run folder).
    """
    if not (Path(out) / "manifest.json").is_file():
        return []
    from pipeline.report import build_report

    return build_report(Path(out))
