"""Verdicts for every handoff and for the whole chain, from per-episode outcomes (pure).

The rules (stated in library/checker/README.md):

- Distinct trajectories: only the first episode of each distinct trajectory counts.
  One distinct trajectory is one trial: the verdict holds for that single start,
  and no bound is claimed from repetition.
- ``composes``: a one-sided lower bound at ``confidence`` on the probability of
  handing over at every handoff (entry included) up to and including this one (k' of all n
  episodes) reaches ``require.handoff``. That probability is a product of the
  checked' own success probabilities, each at most 1, so it bounds each of them;
  and because the events are nested (through handoff j implies through j-1),
  all the claims together err with probability at most 1 - confidence: no
  correction across handoffs is needed.
- ``breaks``: the one-sided upper bound on the handoff's own success probability
  (k of the n episodes that reached it) at confidence 1 - alpha/m is below the
  requirement, m = number of checked (Bonferroni, Dunn 1961): all breaks claims
  together err with probability at most alpha.
- The whole chain meets ``require.chain`` when its one-sided lower bound reaches
  it, and fails it when its one-sided upper bound is below it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .trials import Trials, distinct_rows
from .verdict import Estimate, estimate, single_start_estimate

__all__ = ["Decision", "decide", "bonferroni_confidence"]


def bonferroni_confidence(confidence: float, m: int) -> float:
    """Per-test confidence so that m one-sided tests together err with probability <= 1 - confidence."""
    return 1.0 - (1.0 - confidence) / max(1, m)


@dataclass(frozen=True)
class Decision:
    """Estimates per handoff (entry first) and for the whole chain, over the distinct trajectories."""

    all_handoffs: tuple[Estimate, ...]
    chain: Estimate
    episodes: int
    distinct: int

    @property
    def single_start(self) -> bool:
        return self.distinct == 1


def _unreached(require: float, confidence: float, upper: float) -> Estimate:
    from .verdict import Verdict

    return Estimate(0, 0, require, 0.0, 1.0, confidence, upper, Verdict.UNSURE, None, None, True)


def _single(t: Trials, *, require_handoff: float, require_chain: float, confidence: float, upper: float) -> Decision:
    out = []
    for j in range(t.m):
        if t.reached[0, j]:
            out.append(single_start_estimate(bool(t.handed[0, j]), require=require_handoff, confidence=confidence, upper_confidence=upper))
        else:
            out.append(_unreached(require_handoff, confidence, upper))
    chain = single_start_estimate(bool(t.chain[0]), require=require_chain, confidence=confidence, upper_confidence=confidence)
    return Decision(tuple(out), chain, 0, 1)


def decide(
    trials: Trials,
    *,
    require_handoff: float,
    require_chain: float,
    confidence: float,
    composes_confidence: float | None = None,
) -> Decision:
    """Apply the rules above. ``composes_confidence`` (default ``confidence``) is the level of the
    lower bounds, lowered by a sequential plan that spent part of alpha earlier (see sequential.py)."""
    low_conf = confidence if composes_confidence is None else composes_confidence
    upper = bonferroni_confidence(confidence, trials.m)
    rows = distinct_rows(trials.signature)
    t = trials.take(rows)
    if t.n == 1:
        d = _single(t, require_handoff=require_handoff, require_chain=require_chain, confidence=low_conf, upper=upper)
        return Decision(d.all_handoffs, d.chain, trials.n, 1)
    prefix = t.prefix()
    out = []
    for j in range(t.m):
        reached = t.reached[:, j]
        k, n = int(np.sum(t.handed[:, j] & reached)), int(np.sum(reached))
        out.append(
            estimate(k, n, require=require_handoff, confidence=low_conf, upper_confidence=upper, low_from=(int(np.sum(prefix[:, j])), t.n))
        )
    chain = estimate(int(np.sum(t.chain)), t.n, require=require_chain, confidence=low_conf, upper_confidence=confidence)
    return Decision(tuple(out), chain, trials.n, t.n)
