"""The findings charts: one builder per chart, chosen from a registry.

Each builder takes the run's files and the run's palette and returns a
:class:`Figure` (the chart and the finding it carries), or raises
:class:`~pipeline.report.run_files.Missing` when a table it needs is absent, so the
chart is left out with the reason instead of being drawn from invented numbers.
"""

from __future__ import annotations

from typing import Callable

from pipeline.report.charts._common import Figure
from pipeline.report.charts.agreement import agreement
from pipeline.report.charts.arousal import state_arousal
from pipeline.report.charts.budget import time_budget
from pipeline.report.charts.dwell import dwell_curves
from pipeline.report.charts.effects import forest
from pipeline.report.charts.power import power_curve
from pipeline.report.charts.quality import quality
from pipeline.report.charts.switching import switch_locked, switch_rate
from pipeline.report.charts.timeline import session_timeline
from pipeline.report.palette import Palette
from pipeline.report.run_files import Missing, RunFiles

Builder = Callable[[RunFiles, Palette], Figure]

#: name -> (what the chart shows, builder), in the order of the report and the deck.
CHARTS: dict[str, tuple[str, Builder]] = {
    "timeline": ("One session's timeline", session_timeline),
    "switch_rate": ("Switches per hour by cohort", switch_rate),
    "time_budget": ("Time budget by platform group and cohort", time_budget),
    "dwell": ("Dwell time by platform and cohort", dwell_curves),
    "state_arousal": ("Arousal peak, trough and range by state and cohort", state_arousal),
    "switch_locked": ("Switch-locked arousal", switch_locked),
    "effects": ("Model effects", forest),
    "quality": ("Data quality per session", quality),
    "agreement": ("Coder agreement", agreement),
    "power": ("Power curve", power_curve),
}

#: Charts that belong to an optional command; their absence is not a gap in `run`.
OPTIONAL_COMMAND = {"agreement": "screenweave agree", "power": "screenweave power"}


def build_figures(run: RunFiles, pal: Palette, *, session: str | None = None
                  ) -> tuple[list[Figure], dict[str, str]]:
    """Every chart that the run's files allow, and why each other one is left out."""
    figures: list[Figure] = []
    omitted: dict[str, str] = {}
    for name, (_, builder) in CHARTS.items():
        try:
            if name == "timeline":
                fig = session_timeline(run, pal, session)
            else:
                fig = builder(run, pal)
        except Missing as why:
            reason = str(why)
            if name in OPTIONAL_COMMAND and "was not written" in reason:
                reason = f"`{OPTIONAL_COMMAND[name]}` has not been run for this output ({why})"
            omitted[name] = reason
            continue
        figures.append(fig)
    return figures, omitted


__all__ = ["CHARTS", "Figure", "build_figures"]
