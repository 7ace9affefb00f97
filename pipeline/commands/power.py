"""`screenweave power`: how many participants the cohort switch-rate comparison needs."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from pipeline.cli import app, guarded

#: File written inside OUT.
POWER_FILE = "power.csv"


def parse_participants(text: str) -> list[int]:
    """'8,12,16' -> [8, 12, 16]; a clear error for anything else."""
    from pipeline.errors import ConfigError

    values = []
    for part in text.replace(" ", "").split(","):
        if not part:
            continue
        try:
            values.append(int(part))
        except ValueError:
            raise ConfigError(f"--participants {text!r}: {part!r} is not a whole number",
                              hint="e.g. --participants 8,12,16") from None
    if not values:
        raise ConfigError("--participants is empty", hint="e.g. --participants 8,12,16")
    return values


def power_lines(table) -> list[str]:
    """One readable line per number of participants."""
    lines = []
    for _, r in table.iterrows():
        lines.append(
            f"{int(r['participants_per_cohort'])} participants per cohort: power "
            f"{r['power']:.2f} (95% {r['interval'].replace('_', '-')} interval "
            f"{r['ci_low']:.2f} to {r['ci_high']:.2f}; {int(r['n_significant'])} of "
            f"{int(r['n_simulations'])} simulated studies significant at "
            f"{r['alpha']:g}; CI coverage of the true ratio {r['ci_coverage']:.2f})")
    return lines


def write_power_chart(table, out_dir: Path, settings: dict) -> Path | None:
    """The report's power curve for this table, as OUT/charts/power.{png,svg,html}."""
    from pipeline.report.charts.power import power_curve
    from pipeline.report.export import javascript_bundle, write_chart
    from pipeline.report.palette import build_palette
    from pipeline.report.run_files import Missing, RunFiles

    run = RunFiles(out_dir=out_dir, manifest={}, config={"power": settings},
                   tables={"power": table})
    try:
        fig = power_curve(run, build_palette([]))
    except Missing as why:
        typer.echo(f"power chart left out: {why}", err=True)
        return None
    charts = out_dir / "charts"
    charts.mkdir(parents=True, exist_ok=True)
    return write_chart(fig, charts, javascript_bundle()).png


@app.command()
@guarded
def power(
    participants: str = typer.Option(..., "--participants", "-n",
                                     help="Participants per cohort: one value or several, "
                                     "comma-separated (e.g. 8,12,16)."),
    out: Path = typer.Option(..., "--out", "-o", help="Output folder (created if missing); "
                             "power.csv goes there."),
    sessions: int = typer.Option(3, "--sessions", min=1, help="Sessions per participant."),
    hours: float = typer.Option(2.0, "--hours", min=0.1, help="Hours per session."),
    rate_ratio: float = typer.Option(1.5, "--rate-ratio", min=0.05,
                                     help="Switch-rate ratio of the comparison cohort to "
                                     "the reference cohort (the effect size)."),
    simulations: int = typer.Option(200, "--simulations", min=1,
                                    help="Simulated studies per number of participants."),
    seed: int = typer.Option(1, "--seed", min=0, help="Random seed (same seed, same table)."),
    alpha: float = typer.Option(0.05, "--alpha", min=1e-6, max=0.5,
                                help="Significance level of the cohort test."),
    participant_sd: float | None = typer.Option(
        None, "--participant-sd", min=0.0,
        help="SD of the participants' log switch-rate multipliers (the participant random "
        "effect); default: the synthetic generator's (0.25) or that of --options."),
    interval: str = typer.Option("wilson", "--interval",
                                 help="Interval of the power: wilson or clopper_pearson."),
    options: Path | None = typer.Option(
        None, "--options", help="Synthetic-study options TOML: its first cohort is the "
        "behaviour simulated (default: the generator's default first cohort)."),
    study: Path | None = typer.Option(
        None, "--study", help="Study folder or .toml whose [models] and [switching] "
        "settings the analysis uses (default: the defaults)."),
    truth_sessions: int = typer.Option(
        400, "--truth-sessions", min=10,
        help="Session pairs of the large paired simulation that measures the true ratio."),
    workers: int = typer.Option(1, "--workers", min=1,
                                help="Processes simulating in parallel."),
) -> None:
    """Simulation-based power of the cohort comparison of switches per multi-platform hour.

    Simulates whole studies of media codes with the synthetic generator, counts switches
    with the pipeline's definitions and fits the same mixed model as `run`. Writes
    OUT/power.csv: power with its Monte-Carlo interval per number of participants, and
    the power curve as OUT/charts/power.{png,svg,html}.
    """
    from pipeline.config import Config, resolve_study
    from pipeline.models.power import PowerScenario, default_behaviour, power_table
    from pipeline.outputs import OutputFolder

    sizes = parse_participants(participants)
    if options is not None:
        from synthetic_diaries.options import load_options

        synth = load_options(options)
        behaviour, sd = synth.cohorts[0], synth.participant_switch_sd_log
    else:
        from synthetic_diaries.options import SynthOptions

        behaviour, sd = default_behaviour(), SynthOptions().participant_switch_sd_log
    cfg = resolve_study(study)[1] if study is not None else Config()
    scenario = PowerScenario(behaviour, sessions=sessions, hours=hours, rate_ratio=rate_ratio,
                             participant_sd_log=sd if participant_sd is None else participant_sd)
    typer.echo(f"power: {len(sizes)} design(s) x {simulations} simulated studies of "
               f"{sessions} session(s) of {hours:g} h, rate ratio {rate_ratio:g} "
               f"(behaviour {behaviour.name})", err=True)
    with typer.progressbar(length=len(sizes) * simulations, label="simulating",
                           file=sys.stderr) as bar:
        last = [0]

        def progress(done: int, total: int) -> None:
            bar.update(done - last[0])
            last[0] = done

        table = power_table(sizes, scenario, simulations, seed, models=cfg.models,
                            switching=cfg.switching, alpha=alpha, interval=interval,
                            truth_sessions=truth_sessions, workers=workers,
                            progress=progress)
    target = OutputFolder(out)
    path = target.csv(POWER_FILE, table, stage="power")
    chart = write_power_chart(table, target.root, {
        "sessions": sessions, "hours": hours, "rate_ratio": rate_ratio,
        "simulations": simulations, "alpha": alpha, "seed": seed})
    typer.echo(f"true rate ratio of the simulated behaviour: "
               f"{table['true_rate_ratio'].iloc[0]:.3f} (nominal {rate_ratio:g})")
    for line in power_lines(table):
        typer.echo(line)
    typer.echo(f"wrote {path}" + (f" and {chart}" if chart else ""))
    from pipeline.report.refresh import refresh_if_run

    if refresh_if_run(out):
        typer.echo(f"report rebuilt with the power curve: {out / 'report.html'}")
