"""Entry check by sampling: do the chain's initial states lie in the first skill's initiation set?

Initial states are drawn from the chain's initial-state distribution and their
named state is computed by MuJoCo (reset, write, forward; no stepping), so this
costs almost nothing. It belongs to the ``sim`` method (``decided_by: sim``).
The static method proves the entry instead when the distribution is a box over
raw state. The upper bound is Bonferroni-corrected over the chain's checked,
like the handoffs' (``decision.py``).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .decision import bonferroni_confidence
from .evidence import Evidence, Handoff, counterexample_from
from .verdict import estimate

__all__ = ["sample_entry"]


def sample_entry(ctx: Any, j: Handoff) -> Evidence:
    """k of n sampled initial states accepted by the first skill's starts_when."""
    b = ctx.target_skill(j)
    chain = ctx.chain
    n = ctx.options.start_samples
    qpos, qvel = ctx.start_states(n, seed=(ctx.seed, 1))
    state = ctx.named_state(qpos, qvel)
    ok = b.starts_when.evaluate({**state, **b.parameters})
    upper = bonferroni_confidence(chain.confidence, len(ctx.skills))
    est = estimate(int(ok.sum()), n, require=chain.require_handoff, confidence=chain.confidence, upper_confidence=upper)
    names = tuple(ctx.layout.names)
    cex = tuple(
        counterexample_from(b.starts_when, state, int(r), parameters=b.parameters, names=names, source="start", confirmed=True, note=f"sampled initial state {int(r)}")
        for r in np.flatnonzero(~ok)[: ctx.options.max_counterexamples]
    )
    where = "the robot's default initial states" if ctx.start is None else f"initial states {getattr(ctx.start, 'name', '')}".strip()
    return Evidence(
        "sim", est.verdict, f"{est.k} of {n} states sampled from {where} accepted by {b.ref} (MuJoCo forward, no stepping)",
        estimate=est, counterexamples=cex, details={"samples": n},
        points={k: v[:2000] for k, v in state.items()}, accepted=ok[:2000],
    )
