"""Policy over skills: epsilon-greedy on the critic's Q among skills whose starts_when holds.

Harb et al. (2018) and Bacon, Harb & Precup (2017) use the same choice rule;
it needs no extra network and its value is V(s) = (1 - eps) max Q + eps mean Q
over the available skills. Where no skill is available there is no choice:
probabilities and V are 0 there (the episode ends with a refusal, nothing
follows) and ``choose_skills`` returns ``NO_SKILL``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["choose_skills", "skill_values", "skill_probabilities", "NO_SKILL"]

NO_SKILL = -1


def _checked(q: np.ndarray, available: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    q = np.asarray(q, dtype=np.float64)
    available = np.asarray(available, dtype=bool)
    if q.ndim != 2 or available.shape != q.shape:
        raise ValueError(f"q and available must both be (B, n_skills), got {q.shape} and {available.shape}")
    return q, available


def skill_probabilities(q: np.ndarray, available: np.ndarray, *, epsilon: float) -> np.ndarray:
    """(B, n_skills): 1 - eps on the best available skill (first on ties), eps spread evenly; 0 rows where none is available."""
    q, available = _checked(q, available)
    masked = np.where(available, q, -np.inf)
    best = np.argmax(masked, axis=1)
    n_avail = np.maximum(available.sum(axis=1, keepdims=True), 1)
    probs = np.where(available, epsilon / n_avail, 0.0)
    any_avail = available.any(axis=1)
    probs[np.flatnonzero(any_avail), best[any_avail]] += 1.0 - epsilon
    return probs


def skill_values(q: np.ndarray, available: np.ndarray, *, epsilon: float) -> np.ndarray:
    """V(s) = sum_w pi(w | s) Q(s, w) under the epsilon-greedy choice, (B,); 0 where no skill is available."""
    probs = skill_probabilities(q, available, epsilon=epsilon)
    return np.sum(probs * np.where(probs > 0, np.asarray(q, dtype=np.float64), 0.0), axis=1)


def choose_skills(q: np.ndarray, available: np.ndarray, *, epsilon: float, rng: np.random.Generator) -> np.ndarray:
    """Sample one skill index per row, (B,) int64, ``NO_SKILL`` where none is available (one uniform draw per row)."""
    probs = skill_probabilities(q, available, epsilon=epsilon)
    u = rng.random(probs.shape[0])
    cdf = np.cumsum(probs, axis=1)
    choice = np.minimum(np.sum(cdf < u[:, None] * cdf[:, -1:], axis=1), probs.shape[1] - 1).astype(np.int64)
    return np.where(probs.sum(axis=1) > 0, choice, NO_SKILL)
