"""`screenweave agree STUDY --out OUT`: agreement between coders of the same sessions."""

from __future__ import annotations

from pathlib import Path

import typer

from pipeline.cli import app, guarded

#: Where the agreement tables go inside OUT.
FOLDER = "agreement"


@app.command()
@guarded
def agree(
    study: Path = typer.Argument(..., help="Study folder, or a .toml whose [study] data_dir "
                                 "names one."),
    out: Path = typer.Option(..., "--out", "-o", help="Output folder (created if missing); "
                             "tables go to OUT/agreement/."),
    tolerance: int | None = typer.Option(None, "--tolerance", min=0,
                                  help="Seconds two coders' switches may differ and still "
                                  "match; overrides [agreement] switch_tolerance_s "
                                  "(default 2)."),
) -> None:
    """Agreement between coders of the same sessions: kappa, alpha and switch matching.

    Needs sessions coded by two or more coders (a `coder` column in the media log, or
    one media_log/*.csv file per coder). Writes OUT/agreement/sessions.csv (one row per
    session and pair of coders), confusion.csv, alpha.csv, switch_matches.csv and
    study.csv (pooled).
    """
    from pipeline.agreement.tables import agreement_tables, study_agreement
    from pipeline.agreement.summary import summary_lines
    from pipeline.config import AgreementSettings, resolve_study
    from pipeline.errors import InputError
    from pipeline.ingest import load_study
    from pipeline.outputs import OutputFolder

    folder, cfg, _ = resolve_study(study)
    if tolerance is not None:
        settings = AgreementSettings(**{**cfg.agreement.model_dump(),
                                        "switch_tolerance_s": tolerance})
        cfg = cfg.model_copy(update={"agreement": settings})
    data = load_study(folder, cfg)
    results = study_agreement(data, cfg)
    if not any(r.pairs for r in results):
        raise InputError(
            "media_log.csv", "no session is coded by two or more coders", column="coder",
            hint="give the media log a coder column with two coders' rows for the same "
            "session, or put one file per coder in media_log/")
    tables = agreement_tables(results, cfg.agreement.switch_tolerance_s,
                              cfg.agreement.switch_matching)
    target = OutputFolder(out)
    for name, table in tables.items():
        target.csv(f"{FOLDER}/{name}", table, stage="agreement")
    for line in summary_lines(tables["study.csv"].iloc[0].to_dict(), len(data.sessions),
                              len(tables["alpha.csv"])):
        typer.echo(line)
    typer.echo(f"wrote {target.path(FOLDER)}")
    from pipeline.report.refresh import refresh_if_run

    if refresh_if_run(out):
        typer.echo(f"report rebuilt with the agreement section: {out / 'report.html'}")
