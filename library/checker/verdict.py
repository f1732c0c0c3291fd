"""Handoff verdicts, the one-sided rule that turns counts into one, and the exit code of a whole check."""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

from .stats import episodes_to_decide, lower_bound, upper_bound

__all__ = ["Verdict", "Estimate", "estimate", "single_start_estimate", "exit_code_for"]


class Verdict(str, Enum):
    """What the checker concluded about one handoff (or about the whole chain's requirement)."""

    COMPOSES = "composes"
    BREAKS = "breaks"
    UNSURE = "unsure"

    def __str__(self) -> str:
        return self.value


@dataclass(frozen=True)
class Estimate:
    """k successes in n trials, the one-sided bounds the verdict rests on, and that verdict.

    ``low`` is a lower bound at ``low_confidence`` (``composes`` when it reaches
    ``require``); it may come from other counts than k/n (``low_from``: the episodes
    that succeeded through this handoff, out of all episodes). ``high`` is an
    upper bound at ``high_confidence`` (``breaks`` when it is below ``require``).
    ``more_episodes``: how many more episodes at the observed rates would decide
    an ``unsure`` verdict (None when no number would). ``single_start``: one
    distinct trajectory; the verdict holds for that start only, with no bound.
    """

    k: int
    n: int
    require: float
    low: float
    high: float
    low_confidence: float
    high_confidence: float
    verdict: Verdict
    more_episodes: int | None = None
    low_from: tuple[int, int] | None = None
    single_start: bool = False

    def __post_init__(self) -> None:
        if not 0 <= self.k <= self.n:
            raise ValueError(f"estimate needs 0 <= k <= n, got k={self.k}, n={self.n}")
        if not (0.0 <= self.low <= 1.0 and 0.0 <= self.high <= 1.0):
            raise ValueError(f"estimate bounds must lie in [0, 1], got ({self.low}, {self.high})")

    @property
    def rate(self) -> float | None:
        return self.k / self.n if self.n else None

    def to_dict(self) -> dict:
        return {
            "successes": self.k,
            "episodes": self.n,
            "success_rate": self.rate,
            "require": self.require,
            "lower_bound": self.low,
            "lower_confidence": self.low_confidence,
            "lower_bound_from": None if self.low_from is None else {"successes": self.low_from[0], "episodes": self.low_from[1]},
            "upper_bound": self.high,
            "upper_confidence": self.high_confidence,
            "verdict": self.verdict.value,
            "more_episodes": self.more_episodes,
            "single_start": self.single_start,
        }


def estimate(
    k: int,
    n: int,
    *,
    require: float,
    confidence: float,
    upper_confidence: float | None = None,
    low_from: tuple[int, int] | None = None,
) -> Estimate:
    """Verdict from counts, one-sided in each direction (Clopper-Pearson bounds).

    ``composes`` when the lower bound at ``confidence`` reaches ``require``: computed
    from ``low_from`` = (successes through this handoff, all episodes) when given,
    else from k/n. ``breaks`` when the upper bound of k/n at ``upper_confidence``
    (default ``confidence``; a Bonferroni-corrected level across handoffs) is below it.
    """
    if not 0.0 < require < 1.0:
        raise ValueError(f"require must be in (0, 1), got {require}; use e.g. 0.95")
    up = confidence if upper_confidence is None else upper_confidence
    lk, ln = low_from if low_from is not None else (k, n)
    low = lower_bound(lk, ln, confidence) if ln else 0.0
    high = upper_bound(k, n, up)
    if ln and low >= require:
        verdict, more = Verdict.COMPOSES, None
    elif n and high < require:
        verdict, more = Verdict.BREAKS, None
    else:
        verdict = Verdict.UNSURE
        more = _more(k, n, lk, ln, require, confidence, up)
    return Estimate(int(k), int(n), require, low, high, confidence, up, verdict, more, None if low_from is None else (int(lk), int(ln)))


def _more(k: int, n: int, lk: int, ln: int, require: float, confidence: float, up: float) -> int | None:
    """Episodes to add (to all episodes, so ln grows; n grows in proportion) that decide at these rates."""
    if not ln:
        return None
    if lk / ln > require:
        return episodes_to_decide(lk, ln, require=require, confidence=confidence)
    if n and k / n < require:
        more_n = episodes_to_decide(k, n, require=require, confidence=up)
        return None if more_n is None else -(-more_n * ln // n)
    return None


def single_start_estimate(handed_over: bool, *, require: float, confidence: float, upper_confidence: float) -> Estimate:
    """One distinct trajectory: the outcome decides for that single start, no bound is claimed."""
    verdict = Verdict.COMPOSES if handed_over else Verdict.BREAKS
    k = int(handed_over)
    return Estimate(k, 1, require, float(k), float(k), confidence, upper_confidence, verdict, None, None, True)


def exit_code_for(verdicts: list[Verdict]) -> int:
    """0 all compose, 1 something breaks, 3 something unsure (and nothing breaks).

    Pass the handoff verdicts and the whole chain's requirement verdict together.
    """
    if any(v is Verdict.BREAKS for v in verdicts):
        return 1
    if any(v is Verdict.UNSURE for v in verdicts):
        return 3
    return 0
