"""Handoff verdicts, the rule that turns counts into one, and the exit code of a whole check."""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

from .stats import clopper_pearson, episodes_to_decide

__all__ = ["Verdict", "Estimate", "estimate", "exit_code_for"]


class Verdict(str, Enum):
    """What the checker concluded about one handoff."""

    COMPOSES = "composes"
    BREAKS = "breaks"
    UNSURE = "unsure"

    def __str__(self) -> str:
        return self.value


@dataclass(frozen=True)
class Estimate:
    """k successes in n trials, the exact interval and the verdict it supports.

    ``more_episodes`` is how many more trials at the observed rate would decide an
    ``unsure`` verdict (None when no number would, e.g. the rate equals ``require``).
    """

    k: int
    n: int
    confidence: float
    require: float
    low: float
    high: float
    verdict: Verdict
    more_episodes: int | None

    def __post_init__(self) -> None:
        if not 0 <= self.k <= self.n:
            raise ValueError(f"estimate needs 0 <= k <= n, got k={self.k}, n={self.n}")
        if not 0.0 <= self.low <= self.high <= 1.0:
            raise ValueError(f"estimate interval must satisfy 0 <= low <= high <= 1, got ({self.low}, {self.high})")

    @property
    def rate(self) -> float | None:
        return self.k / self.n if self.n else None

    def to_dict(self) -> dict:
        return {
            "k": self.k,
            "n": self.n,
            "rate": self.rate,
            "interval": [self.low, self.high],
            "confidence": self.confidence,
            "verdict": self.verdict.value,
            "more_episodes": self.more_episodes,
        }


def estimate(k: int, n: int, *, require: float, confidence: float) -> Estimate:
    """Verdict from counts: composes if the interval's low end >= require, breaks if its high end < require.

    The interval is the two-sided Clopper-Pearson interval at ``confidence``, so
    each claim is a one-sided test at level ``(1 - confidence) / 2``.
    """
    if not 0.0 < require < 1.0:
        raise ValueError(f"require must be in (0, 1), got {require}; use e.g. 0.95")
    low, high = clopper_pearson(k, n, confidence)
    if n > 0 and low >= require:
        verdict, more = Verdict.COMPOSES, None
    elif n > 0 and high < require:
        verdict, more = Verdict.BREAKS, None
    else:
        verdict = Verdict.UNSURE
        more = episodes_to_decide(k, n, require=require, confidence=confidence) if n else None
    return Estimate(int(k), int(n), confidence, require, low, high, verdict, more)


def exit_code_for(verdicts: list[Verdict]) -> int:
    """0 all compose, 1 some handoff breaks, 3 some unsure (and none breaks)."""
    if any(v is Verdict.BREAKS for v in verdicts):
        return 1
    if any(v is Verdict.UNSURE for v in verdicts):
        return 3
    return 0
