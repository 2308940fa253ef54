"""Errors, locations and exit codes: one place for all of them.

Library code raises :class:`ReportgenError` subclasses; only ``cli.py`` turns them into
messages on stderr and exit codes.  A message names the file, the line and the field:

    studies/demo/study.yaml:14:5: error: raters[2].id: duplicate id 'R3'
      hint: give every rater its own id
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


class ExitCode(enum.IntEnum):
    """Exit codes of the ``reportgen`` command, documented in the README."""

    OK = 0
    #: the command ran, but what it checked did not hold (verify mismatch, register --fail-on)
    FAILED = 1
    #: bad input: study definition, ratings, reference, key, criteria, or command-line usage
    INPUT = 2
    #: the report could not be rendered (template, font, refused resource)
    RENDER = 3
    #: warnings were raised and --strict was given
    STRICT = 4
    #: an output would overwrite something that must be kept (archived report, built revision)
    EXISTS = 5
    #: a bug in reportgen; re-run with --traceback
    INTERNAL = 70


@dataclass(frozen=True)
class Location:
    """Where a problem is: a file, and optionally a 1-based line, column and field name."""

    path: str
    line: int | None = None
    column: int | None = None
    key: str | None = None

    def prefix(self) -> str:
        out = self.path
        if self.line is not None:
            out += f":{self.line}"
            if self.column is not None:
                out += f":{self.column}"
        return out


@dataclass(frozen=True)
class Problem:
    """One thing wrong with the input."""

    location: Location
    message: str
    hint: str | None = None
    severity: str = "error"  # "error" | "warning"

    def format(self) -> str:
        key = f"{self.location.key}: " if self.location.key else ""
        out = f"{self.location.prefix()}: {self.severity}: {key}{self.message}"
        if self.hint:
            out += f"\n  hint: {self.hint}"
        return out

    def as_dict(self) -> dict[str, Any]:
        return {
            "file": self.location.path,
            "line": self.location.line,
            "column": self.location.column,
            "field": self.location.key,
            "severity": self.severity,
            "message": self.message,
            "hint": self.hint,
        }


class ReportgenError(Exception):
    """Base class of every error reportgen raises on purpose."""

    exit_code: ExitCode = ExitCode.INTERNAL

    def problems(self) -> list[Problem]:
        return [Problem(Location("reportgen"), str(self))]


@dataclass
class InputError(ReportgenError):
    """Bad input: carries every problem found, not only the first."""

    items: list[Problem] = field(default_factory=list)
    exit_code: ExitCode = ExitCode.INPUT

    def __post_init__(self) -> None:
        super().__init__("\n".join(p.format() for p in self.items))

    def problems(self) -> list[Problem]:
        return list(self.items)

    def __str__(self) -> str:
        return "\n".join(p.format() for p in self.items)

    @classmethod
    def single(
        cls,
        path: str | Path,
        message: str,
        *,
        line: int | None = None,
        column: int | None = None,
        key: str | None = None,
        hint: str | None = None,
    ) -> InputError:
        return cls([Problem(Location(str(path), line, column, key), message, hint)])


class RenderError(ReportgenError):
    exit_code = ExitCode.RENDER


class ExistsError(ReportgenError):
    exit_code = ExitCode.EXISTS


class CheckFailed(ReportgenError):
    """A check the user asked for did not hold (verify mismatch, expired inspectors)."""

    exit_code = ExitCode.FAILED


class ProblemCollector:
    """Collects problems up to a limit; ``raise_if_any`` raises one InputError with all."""

    def __init__(self, limit: int = 50) -> None:
        self.limit = limit
        self.items: list[Problem] = []
        self.dropped = 0

    def add(
        self,
        path: str | Path,
        message: str,
        *,
        line: int | None = None,
        column: int | None = None,
        key: str | None = None,
        hint: str | None = None,
    ) -> None:
        if len(self.items) >= self.limit:
            self.dropped += 1
            return
        self.items.append(Problem(Location(str(path), line, column, key), message, hint))

    def extend(self, problems: list[Problem]) -> None:
        for p in problems:
            if len(self.items) >= self.limit:
                self.dropped += 1
            else:
                self.items.append(p)

    def __bool__(self) -> bool:
        return bool(self.items)

    def raise_if_any(self) -> None:
        if not self.items:
            return
        items = list(self.items)
        if self.dropped:
            last = items[-1].location
            items.append(
                Problem(
                    Location(last.path),
                    f"{self.dropped} further problem(s) not shown",
                    "fix the ones above and run again",
                )
            )
        raise InputError(items)
