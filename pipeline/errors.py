"""Typed errors: every refusal says where, what, and what to do.

Three kinds, each with an exit status the CLI uses:

* :class:`InputError` - something in the user's study folder is wrong (exit 2).
* :class:`ConfigError` - a setting is unknown or out of range (exit 2).
* :class:`StageError` - a computation could not finish for one session (exit 3).

Validation collects many :class:`Problem` records and raises one
:class:`InputError` carrying all of them, so a user fixes a file in one pass.
The CLI is the only place that catches these and prints them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

#: How many problems of one file are printed before the rest are counted.
MAX_PROBLEMS_SHOWN = 20

EXIT_OK = 0
EXIT_INPUT = 2
EXIT_STAGE = 3
EXIT_PARTIAL = 4


@dataclass(frozen=True)
class Problem:
    """One thing wrong in one place of one input file.

    ``line`` is the line number in the file as a text editor shows it (the header
    is line 1, so the first data row is line 2).
    """

    file: str
    problem: str
    line: int | None = None
    column: str | None = None
    value: Any = None
    hint: str | None = None

    def render(self) -> str:
        where = self.file
        if self.line is not None:
            where += f", line {self.line}"
        if self.column is not None:
            where += f", column {self.column!r}"
        text = f"{where}: "
        if self.value is not None:
            text += f"value {_short(self.value)!r} "
        text += self.problem
        if self.hint:
            text += f" (hint: {self.hint})"
        return text


def _short(value: Any, limit: int = 60) -> str:
    text = str(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


class ScreenweaveError(Exception):
    """Base of every error meant for the user; carries a hint and an exit status."""

    exit_code = EXIT_INPUT

    def __init__(self, message: str, hint: str | None = None):
        super().__init__(message)
        self.message = message
        self.hint = hint

    def render(self) -> str:
        return self.message + (f"\n  hint: {self.hint}" if self.hint else "")


class InputError(ScreenweaveError):
    """One or more problems in the user's input files.

    Build it from one problem (``InputError("roster.csv", line=3, ...)``) or from
    many (``InputError.from_problems([...])``).
    """

    exit_code = EXIT_INPUT

    def __init__(
        self,
        file: str | Path,
        problem: str = "",
        *,
        line: int | None = None,
        column: str | None = None,
        value: Any = None,
        hint: str | None = None,
        problems: Iterable[Problem] | None = None,
    ):
        if problems is None:
            problems = [Problem(str(file), problem, line, column, value, hint)]
        self.problems: list[Problem] = list(problems)
        super().__init__(self._summary(), hint=None)

    @classmethod
    def from_problems(cls, problems: Iterable[Problem]) -> "InputError":
        problems = list(problems)
        return cls(problems[0].file if problems else "input", problems=problems)

    def _summary(self) -> str:
        return "\n".join(self.render_lines())

    def render_lines(self) -> list[str]:
        lines: list[str] = []
        by_file: dict[str, list[Problem]] = {}
        for p in self.problems:
            by_file.setdefault(p.file, []).append(p)
        for file, probs in by_file.items():
            for p in probs[:MAX_PROBLEMS_SHOWN]:
                lines.append(p.render())
            rest = len(probs) - MAX_PROBLEMS_SHOWN
            if rest > 0:
                lines.append(f"{file}: ... and {rest} more problem(s) of this file not shown")
        return lines

    def render(self) -> str:
        return self._summary()


class ConfigError(ScreenweaveError):
    """A setting that is unknown, misspelt or out of range."""

    exit_code = EXIT_INPUT


class StageError(ScreenweaveError):
    """A pipeline stage failed for one unit of work (usually one session)."""

    exit_code = EXIT_STAGE

    def __init__(self, message: str, *, unit: str | None = None, stage: str | None = None,
                 hint: str | None = None):
        self.unit = unit
        self.stage = stage
        prefix = ""
        if stage:
            prefix += f"[{stage}] "
        if unit:
            prefix += f"{unit}: "
        super().__init__(prefix + message, hint=hint)


@dataclass
class ProblemCollector:
    """Gathers problems while a file is validated, then raises them together."""

    problems: list[Problem] = field(default_factory=list)

    def add(self, file: str, problem: str, *, line: int | None = None, column: str | None = None,
            value: Any = None, hint: str | None = None) -> None:
        self.problems.append(Problem(str(file), problem, line, column, value, hint))

    def extend(self, problems: Iterable[Problem]) -> None:
        self.problems.extend(problems)

    def __bool__(self) -> bool:
        return bool(self.problems)

    def raise_if_any(self) -> None:
        if self.problems:
            raise InputError.from_problems(self.problems)


def choose(registry: dict, name: str, what: str, suffix: str = ""):
    """``registry[name]``, or a ConfigError whose hint lists the registry's keys.

    The message reads ``unknown {what} {name!r}{suffix}`` (e.g. ``unknown SCR method
    'x' in [signals.scr]``); because the choices come from the registry itself, the
    error cannot drift from the methods that exist.
    """
    try:
        return registry[name]
    except KeyError:
        raise ConfigError(f"unknown {what} {name!r}{suffix}",
                          hint=f"choose one of {', '.join(sorted(registry))}") from None
