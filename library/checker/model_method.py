"""Model method: sample end states of A from its fitted end-state model and test B's starts_when.

Particles start from the chain's start distribution and pass through the
skills before A: at each skill a particle is kept with the duration model's
probability of stopping (so the states reflect P(end | stopped)), moves to a
draw from the stopped end-state model, and must be accepted by the next skill.
At the handoff, k of n particles are accepted; the exact interval covers the
Monte Carlo error of the models' prediction, not the models' own error (their
held-out errors are reported with the evidence).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .evidence import Evidence, Handoff, counterexample_from
from .registry import checker_method
from .verdict import Verdict, estimate

__all__ = ["model_method", "skill_models"]


def skill_models(ctx: Any, index: int) -> Any:
    """The option models attached to step ``index``'s version (None: none attached, or not stored)."""
    key = f"models:{index}"
    if key not in ctx.cache:
        skill = ctx.skills[index]
        models = None
        if ctx.store is not None and "@" in skill.ref and not skill.ref.endswith((".yaml", ".yml")):
            from ..api import load_models

            try:
                models = load_models(skill.ref, store=ctx.store)
            except Exception as exc:  # a damaged or incompatible model file: skip the method, say why
                ctx.notes.append(f"option models of {skill.ref} could not be read: {exc}")
                models = None
        ctx.cache[key] = models
    return ctx.cache[key]


def _propagate(ctx: Any, j: Handoff, rng: np.random.Generator) -> tuple[dict, str | None]:
    """End states of step j-1 conditioned on stopping, reached through the chain; or why not."""
    n = ctx.options.model_samples
    qpos, qvel = ctx.start_states(n, seed=(ctx.seed, 7919))
    state = ctx.named_state(qpos, qvel)
    for i in range(j.index):
        skill = ctx.skills[i]
        models = skill_models(ctx, i)
        if models is None or models.end_state is None:
            return {}, f"{skill.ref} has no end-state model attached (fit with `kinetome fit {skill.ref}`)"
        missing = [q for q in models.features if q not in state]
        if missing:
            return {}, f"{skill.ref}'s models read {missing}, which the previous end-state model does not predict"
        if i > 0:
            ok = skill.starts_when.evaluate({**state, **skill.parameters})
            state = {k: v[ok] for k, v in state.items()}
        if not state or next(iter(state.values())).shape[0] == 0:
            return state, None
        p_stop = np.clip(models.duration.predict(state)["p_stopped"], 0.0, 1.0)
        keep = rng.random(p_stop.shape[0]) < p_stop
        state = {k: v[keep] for k, v in state.items()}
        if next(iter(state.values())).shape[0] == 0:
            return state, None
        draws = models.end_state.sample(state, rng, 1)
        state = {k: v[:, 0] for k, v in draws.items()}
    return state, None


@checker_method("model", cost=20, summary="option models: sampled end states of A tested against B's starts_when")
def model_method(ctx: Any, checked: list[Handoff]) -> dict[int, Evidence]:
    """Option models: sampled end states of A tested against B's starts_when."""
    out: dict[int, Evidence] = {}
    for j in checked:
        if j.is_entry:
            continue
        a_models = skill_models(ctx, j.index - 1)
        if a_models is None:
            continue
        b = ctx.target_skill(j)
        rng = np.random.default_rng([ctx.seed, 104729, j.index])
        state, why = _propagate(ctx, j, rng)
        if why is not None:
            ctx.notes.append(f"model method skipped {j.label}: {why}")
            continue
        missing = sorted(n for n in b.starts_when.names if n not in state and n not in b.parameters)
        if missing:
            ctx.notes.append(f"model method skipped {j.label}: the end-state model of {j.source} does not predict {missing}")
            continue
        n = next(iter(state.values())).shape[0] if state else 0
        ok = b.starts_when.evaluate({**state, **b.parameters}) if n else np.zeros(0, dtype=bool)
        est = estimate(int(ok.sum()), n, require=ctx.chain.require_handoff, confidence=ctx.chain.confidence)
        names = tuple(sorted(state))
        bad = np.flatnonzero(~ok)[: ctx.options.max_counterexamples]
        cex = tuple(
            counterexample_from(b.starts_when, state, int(r), parameters=b.parameters, names=names, source="model", confirmed=False, note=f"end-state model sample {int(r)}")
            for r in bad
        )
        errors = a_models.end_state.errors if a_models.end_state is not None else {}
        # Models not yet checked against this task (env, variant, version, support) inform but do not decide.
        out[j.index] = Evidence(
            "model", Verdict.UNSURE,
            f"{est.k} of {n} model end states of {j.source} accepted by {j.target} (the models' task is not checked: informative only)",
            estimate=est, candidates=cex,
            details={"samples": n, "end_state_errors": errors, "outcomes": a_models.outcome_fractions()},
            points={k: v[:2000] for k, v in state.items()}, accepted=ok[:2000],
        )
    return out
