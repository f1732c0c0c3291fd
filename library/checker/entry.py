"""Entry check: do the chain's start states lie in the first skill's initiation set? (by sampling)

Start states are drawn from the start distribution and their named state is
computed by MuJoCo (reset, write, forward; no stepping), so this costs no
simulation. The static method proves the entry when the distribution is a box
over raw state; otherwise this sample decides, with an exact interval.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .evidence import Evidence, Junction, counterexample_from
from .verdict import estimate

__all__ = ["sample_entry"]


def sample_entry(ctx: Any, j: Junction) -> Evidence:
    """k of n sampled start states accepted by the first skill's starts_when."""
    b = ctx.target_skill(j)
    n = ctx.options.start_samples
    qpos, qvel = ctx.start_states(n, seed=ctx.seed + 1)
    state = ctx.named_state(qpos, qvel)
    ok = b.starts_when.evaluate({**state, **b.parameters})
    est = estimate(int(ok.sum()), n, require=ctx.chain.require, confidence=ctx.chain.confidence)
    names = tuple(ctx.layout.names)
    cex = tuple(
        counterexample_from(b.starts_when, state, int(r), parameters=b.parameters, names=names, source="start", confirmed=True, note=f"sampled start state {int(r)}")
        for r in np.flatnonzero(~ok)[: ctx.options.max_counterexamples]
    )
    where = "the rig's default start" if ctx.start is None else f"start distribution {getattr(ctx.start, 'name', '')}".strip()
    return Evidence(
        "sample", est.verdict, f"{est.k} of {n} states from {where} accepted by {b.ref}",
        estimate=est, counterexamples=cex, details={"samples": n},
        points={k: v[:2000] for k, v in state.items()}, accepted=ok[:2000],
    )
