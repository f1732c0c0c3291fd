"""Errors raised by envs for bad task variants and initial-states distributions.

envs imports nothing else of kinetome, so it has its own small error type; the
library maps it to exit code 2 with one line per problem.
"""

from __future__ import annotations

__all__ = ["EnvConfigError"]


class EnvConfigError(ValueError):
    """A variant or start-distribution file is invalid; ``problems`` lists each one.

    Each problem is a finished line: ``FILE:LINE: field: what is wrong; fix``.
    """

    def __init__(self, problems: list[str]):
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))
