"""The one exception tree of kinetome and the exit code each maps to.

The CLI prints one clean line per problem (``FILE:LINE: field: what; fix``)
and exits with ``exit_code``; tracebacks only with ``--debug``.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "Problem",
    "KinetomeError",
    "InvalidInputError",
    "InvalidSpecError",
    "NotFoundError",
    "ExecutionError",
    "StoreIntegrityError",
    "StoreUnavailableError",
    "BundleError",
    "SignatureError",
    "TrainingError",
    "NoRegionFoundError",
]


@dataclass(frozen=True)
class Problem:
    """One thing wrong with an input: where, what, and how to fix it."""

    source: str  # file path, or "<string>"
    line: int | None
    field: str  # dotted path such as "controller.parameters.kp"
    message: str
    fix: str = ""

    def __str__(self) -> str:
        where = f"{self.source}:{self.line}" if self.line is not None else self.source
        text = f"{where}: {self.field}: {self.message}" if self.field else f"{where}: {self.message}"
        return f"{text}; {self.fix}" if self.fix else text


class KinetomeError(Exception):
    """Root of every error kinetome raises on purpose."""

    exit_code = 2

    def lines(self) -> list[str]:
        """The clean one-line-per-problem form the CLI prints."""
        return [str(self)]


class InvalidInputError(KinetomeError):
    """A user file or argument is wrong; carries every problem found at once."""

    def __init__(self, problems: "list[Problem | str] | str"):
        if isinstance(problems, str):
            problems = [problems]
        # a str is a problem line already formatted elsewhere (e.g. by kinetome.envs)
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    def lines(self) -> list[str]:
        return [str(p) for p in self.problems]


class InvalidSpecError(InvalidInputError):
    """A skill spec failed schema or semantic validation."""


class NotFoundError(KinetomeError):
    """A skill, version, blob or model that was asked for does not exist."""


class StoreIntegrityError(KinetomeError):
    """Stored content no longer matches its digest, or the index is damaged."""

    exit_code = 1


class StoreUnavailableError(KinetomeError):
    """The store's database server or blob storage cannot be reached (nothing was changed)."""

    exit_code = 1


class BundleError(KinetomeError):
    """A bundle archive is unsafe or inconsistent; nothing was imported."""


class SignatureError(BundleError):
    """A bundle is unsigned where signatures are required, signed with another key, or changed after signing."""

    exit_code = 1


class ExecutionError(KinetomeError):
    """Work could not run where it was sent: a Ray cluster that cannot be reached, refuses, or keeps losing workers."""

    exit_code = 2


class TrainingError(KinetomeError):
    """Training could not continue (e.g. NaN/Inf); the last good checkpoint is kept."""

    exit_code = 1


class NoRegionFoundError(KinetomeError):
    """learn-initiation found no start region where the skill meets the precision asked for (nothing stored)."""

    exit_code = 1
