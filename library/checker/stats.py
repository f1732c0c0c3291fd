"""Exact binomial bounds for handoff probabilities, and how many episodes decide a verdict.

Pure numeric functions (scipy only). ``confidence`` is the coverage of an interval,
e.g. 0.95; ``alpha = 1 - confidence``.
"""

from __future__ import annotations

import math
from typing import Callable

__all__ = [
    "clopper_pearson",
    "lower_bound",
    "upper_bound",
    "zero_failure_bound",
    "episodes_for_zero_failures",
    "episodes_to_decide",
    "smallest_deciding",
]

_MAX_EPISODES = 10**9


def _check(k: float, n: float, confidence: float) -> None:
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}; use e.g. 0.95")
    if n < 0 or k < 0 or k > n:
        raise ValueError(f"successes must satisfy 0 <= k <= n, got k={k}, n={n}")


def _beta_ppf(q: float, a: float, b: float) -> float:
    """Quantile q of Beta(a, b): the inverse of the regularised incomplete beta function."""
    from scipy.special import betaincinv

    return float(betaincinv(a, b, q))


def lower_bound(k: float, n: float, confidence: float) -> float:
    """One-sided exact lower bound: P(p >= bound) >= confidence (Clopper-Pearson).

    ``k`` may be fractional (used when projecting an observed rate to more episodes).
    """
    _check(k, n, confidence)
    if k <= 0:
        return 0.0
    return _beta_ppf(1.0 - confidence, k, n - k + 1.0)


def upper_bound(k: float, n: float, confidence: float) -> float:
    """One-sided exact upper bound: P(p <= bound) >= confidence (Clopper-Pearson)."""
    _check(k, n, confidence)
    if n == 0 or k >= n:
        return 1.0
    return _beta_ppf(confidence, k + 1.0, n - k)


def clopper_pearson(k: float, n: float, confidence: float) -> tuple[float, float]:
    """Two-sided exact interval (low, high) for a binomial proportion, k of n.

    Each end is a one-sided bound at ``1 - alpha/2`` (Clopper and Pearson, 1934).
    With no trials the interval is (0, 1).
    """
    _check(k, n, confidence)
    if n == 0:
        return (0.0, 1.0)
    tail = 1.0 - (1.0 - confidence) / 2.0
    return (lower_bound(k, n, tail), upper_bound(k, n, tail))


def zero_failure_bound(n: int, confidence: float) -> float:
    """Upper bound on the failure probability after n trials without a failure.

    Exact one-sided: ``1 - alpha ** (1/n)``; about ``3/n`` at 95% (rule of three).
    """
    _check(0, n, confidence)
    if n == 0:
        return 1.0
    return 1.0 - (1.0 - confidence) ** (1.0 / n)


def episodes_for_zero_failures(require: float, confidence: float) -> int:
    """Fewest clean trials whose one-sided lower bound ``alpha ** (1/n)`` reaches ``require``."""
    if not 0.0 < require < 1.0:
        raise ValueError(f"require must be in (0, 1), got {require}")
    _check(0, 0, confidence)
    n = math.ceil(math.log(1.0 - confidence) / math.log(require))
    while (1.0 - confidence) ** (1.0 / n) < require:  # guard the float rounding of ceil
        n += 1
    while n > 1 and (1.0 - confidence) ** (1.0 / (n - 1)) >= require:
        n -= 1
    return n


def smallest_deciding(decided: Callable[[int], bool], n: int, *, limit: int = _MAX_EPISODES) -> int | None:
    """Smallest m >= n with ``decided(m)``, for a rule that, once true, stays true as m grows.

    Doubling then bisection; None when no m up to ``limit`` decides.
    """
    if decided(n):
        return n
    hi = max(n, 1)
    while not decided(hi):
        hi *= 2
        if hi > limit:
            return None
    lo = max(n, hi // 2)
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if decided(mid):
            hi = mid
        else:
            lo = mid
    return hi


def episodes_to_decide(
    k: int, n: int, *, require: float, confidence: float, upper_confidence: float | None = None, limit: int = _MAX_EPISODES
) -> int | None:
    """Episodes to add so that, at the observed rate k/n, a one-sided bound clears ``require``.

    Above ``require`` the lower bound at ``confidence`` must reach it; below, the
    upper bound at ``upper_confidence`` (default ``confidence``) must fall under it.
    Returns ``m - n`` for the smallest total m; None when the rate equals
    ``require``, there are no trials yet, or more than ``limit`` would be needed.
    """
    _check(k, n, confidence)
    if not 0.0 < require < 1.0:
        raise ValueError(f"require must be in (0, 1), got {require}")
    if n == 0:
        return None
    rate = k / n
    if rate == require:
        return None
    up = confidence if upper_confidence is None else upper_confidence

    def decided(m: int) -> bool:
        if rate > require:
            return lower_bound(rate * m, m, confidence) >= require
        return upper_bound(rate * m, m, up) < require

    m = smallest_deciding(decided, n, limit=limit)
    return None if m is None else m - n
