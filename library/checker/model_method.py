"""Model method: option models that know their task answer the handoffs they can.

A version's option models count only when they were fitted on this chain's task:
the same env and task-variant digest, on this version (the artifact's
``computed_on`` holds its content identity). Particles start from the chain's
initial states and pass through the skills: each skill's start states must lie
inside its models' fitted support (``option_models/support.py``); its outcome is
drawn from the duration model (stopped, timed out, env ended; outcomes never seen
in training keep a floor, never zero); a stopped particle moves to an end state
drawn from the stopped end-state model and conditioned on the skill's own
``stops_when`` by rejection (a skill cannot stop anywhere else); the next skill
must accept it. Queries outside the support are not answered: they count as
failures for the lower bound and as successes for the upper one, and when more
than ``MAX_UNSUPPORTED`` of them reach a handoff the models leave it to
simulation. Every interval is widened by the models' error on the same question,
replayed on their held-out episodes.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from .decision import bonferroni_confidence
from .evidence import Evidence, Handoff, counterexample_from
from .registry import checker_method
from .stats import clopper_pearson
from .verdict import Estimate, Verdict, estimate

__all__ = ["model_method", "skill_models", "task_models", "TaskModels", "held_out_error", "MAX_UNSUPPORTED", "REJECTION_TRIES", "stopped_end_states"]

MAX_UNSUPPORTED = 0.05  # fraction of particles outside the support above which models do not decide
REJECTION_TRIES = 20  # end-state draws per particle to satisfy stops_when


@dataclass(frozen=True, eq=False)
class TaskModels:
    """Option models valid for this check's task, and where they came from."""

    models: Any  # OptionModels
    artifact: str  # name@N/option-models#R
    task: dict


def _refusal(ctx: Any, index: int, why: str) -> None:
    ctx.notes.append(f"option models of {ctx.skills[index].ref} not used: {why}")


def _matching(ctx: Any, store: Any, ref: str, task: dict) -> tuple[Any, str | None]:
    """The newest models artifact of ``ref`` fitted on ``task``, or why there is none."""
    from ..api import MODEL_KIND

    version = store.get(ref)
    found = store.artifacts(version.ref, kind=MODEL_KIND, all_revisions=True)
    if not found:
        return None, None
    seen = []
    for art in reversed(found):
        t = art.task
        if t.get("env") == task["env"] and t.get("variant_digest") == task["variant_digest"] and version.identity in art.computed_on:
            return art, None
        seen.append(f"{t.get('env', '?')} / {t.get('variant', '?')}" if t else "a task it did not record")
    return None, (f"fitted on {', '.join(dict.fromkeys(seen))}; this chain runs {task['env']} / {task['variant']} "
                  f"(fit them on this task: kinetome fit {ref} --variant ...)")


def task_models(store: Any, ref: str, task: dict) -> tuple[TaskModels | None, str]:
    """Option models of ``ref`` valid for ``task`` (``api.model_task``), or None and why not ("" when none exist)."""
    from ..option_models import OptionModels

    art, why = _matching(None, store, ref, task)
    if art is None:
        return None, why or ""
    try:
        models = OptionModels.from_files({role: store.read_artifact(art, role) for role in art.roles})
    except Exception as exc:  # a damaged or incompatible model file: say why, leave it to simulation
        return None, f"{art.ref} could not be read: {exc}"
    if models.support is None or models.held_out is None:
        return None, f"{art.ref} has no support test or held-out episodes (fitted by an older kinetome); refit them"
    return TaskModels(models, art.ref, task), ""


def skill_models(ctx: Any, index: int) -> TaskModels | None:
    """Option models of skill ``index`` valid for the chain's task, or None (the reason goes to the notes)."""
    key = f"models:{index}"
    if key in ctx.cache:
        return ctx.cache[key]
    ctx.cache[key] = None
    skill = ctx.skills[index]
    if ctx.store is None or skill.ref.endswith((".yaml", ".yml")):
        return None
    from ..api import model_task

    found, why = task_models(ctx.store, skill.ref, model_task(ctx.rig))
    if found is None:
        if why:
            _refusal(ctx, index, why)
        return None
    ctx.cache[key] = found
    return found


def stopped_end_states(models: Any, skill: Any, states: dict, rng: np.random.Generator) -> tuple[dict, np.ndarray]:
    """End states of stopped turns that satisfy the skill's ``stops_when`` (rejection, REJECTION_TRIES
    draws per start); the second value marks starts for which no draw satisfied it."""
    n = len(next(iter(states.values())))
    out: dict[str, np.ndarray] | None = None
    done = np.zeros(n, dtype=bool)
    for _ in range(REJECTION_TRIES):
        rows = np.flatnonzero(~done)
        if rows.size == 0:
            break
        draws = models.end_state.sample({k: v[rows] for k, v in states.items()}, rng, 1)
        draws = {k: v[:, 0] for k, v in draws.items()}
        ok = skill.stops_when.evaluate({**draws, **skill.parameters})
        if out is None:
            out = {k: np.zeros((n, *v.shape[1:])) for k, v in draws.items()}
        for k, v in draws.items():
            out[k][rows[ok]] = v[ok]
        done[rows[ok]] = True
    return (out or {}), ~done


@dataclass
class _Particles:
    """Particles through the chain: per handoff index, who reached it, handed over, or became unknown."""

    n: int
    state: dict
    alive: np.ndarray
    unknown: np.ndarray
    reached: list = field(default_factory=list)
    handed: list = field(default_factory=list)
    unknown_at: list = field(default_factory=list)
    chain_ok: np.ndarray | None = None


def _accept(ctx: Any, p: _Particles, i: int) -> None:
    skill = ctx.skills[i]
    ok = np.zeros(p.n, dtype=bool)
    rows = np.flatnonzero(p.alive)
    if rows.size:
        ok[rows] = skill.starts_when.evaluate({**{k: v[rows] for k, v in p.state.items()}, **skill.parameters})
    p.reached.append(p.alive.copy())
    p.handed.append(p.alive & ok)
    p.unknown_at.append(p.unknown.copy())
    p.alive = p.alive & ok


def _step(ctx: Any, p: _Particles, i: int, tm: TaskModels, rng: np.random.Generator) -> None:
    """Run skill ``i`` on the alive particles under its models."""
    skill, models = ctx.skills[i], tm.models
    rows = np.flatnonzero(p.alive)
    if rows.size == 0:  # every particle failed earlier: nothing to ask the models
        return
    starts = {k: v[rows] for k, v in p.state.items()}
    outside = ~models.support.inside(starts)
    pred = models.duration.predict(starts)
    u = rng.random(rows.size)
    stopped = u < pred["p_stopped"]
    timed = ~stopped & (u < pred["p_stopped"] + pred["p_timed_out"]) & ctx.chain.may_time_out[i]
    ends = {k: np.array(v[rows]) for k, v in p.state.items() if k in models.meta.end_quantities}
    if np.any(stopped):
        drawn, failed = stopped_end_states(models, skill, {k: v[stopped] for k, v in starts.items()}, rng)
        for k, v in drawn.items():
            ends[k][stopped] = v
        outside[np.flatnonzero(stopped)[failed]] = True
    if np.any(timed):
        if models.end_state_timed_out is None:
            outside[timed] = True
        else:
            drawn = models.end_state_timed_out.sample({k: v[timed] for k, v in starts.items()}, rng, 1)
            for k, v in drawn.items():
                ends[k][timed] = v[:, 0]
    p.unknown[rows[outside]] = True
    p.alive[rows] = stopped | timed
    for k in list(p.state):
        if k in ends:
            p.state[k] = np.array(p.state[k])
            p.state[k][rows] = ends[k]


def _propagate(ctx: Any, upto: int, rng: np.random.Generator) -> tuple[_Particles, list[TaskModels], int]:
    """Particles through skills 0..upto-1 (and the acceptance of skill ``upto``); the number of skills modelled."""
    n = ctx.options.model_samples
    qpos, qvel = ctx.start_states(n, seed=(ctx.seed, 7919))
    p = _Particles(n, dict(ctx.named_state(qpos, qvel)), np.ones(n, dtype=bool), np.zeros(n, dtype=bool))
    used: list[TaskModels] = []
    for i in range(len(ctx.skills)):
        _accept(ctx, p, i)
        if i >= upto:
            break
        tm = skill_models(ctx, i)
        if tm is None or any(q not in p.state for q in tm.models.features):
            return p, used, i
        used.append(tm)
        _step(ctx, p, i, tm, rng)
    if upto >= len(ctx.skills):
        p.chain_ok = p.alive.copy()
    return p, used, upto


def held_out_error(tm: TaskModels, a: Any, b: Any | None, allowed: bool, *, confidence: float, rng: np.random.Generator) -> float:
    """The models' error on this question, replayed on their held-out episodes: |predicted - actual|
    rate of A handing over to B (B None: of A ending well), plus the exact half-width of the actual rate."""
    models, held = tm.models, tm.models.held_out
    if held.n == 0:
        return 1.0
    from ..runtime.records import EndReason

    ends_well = (held.outcomes == int(EndReason.STOPPED)) | ((held.outcomes == int(EndReason.TIMED_OUT)) & allowed)
    accepted = np.ones(held.n, dtype=bool) if b is None else b.starts_when.evaluate({**held.ends, **b.parameters})
    actual = ends_well & accepted
    pred = models.duration.predict(held.starts)
    if b is None:
        rate = pred["p_stopped"] + (pred["p_timed_out"] if allowed else 0.0)
    else:
        draws, failed = stopped_end_states(models, a, held.starts, rng)
        take = b.starts_when.evaluate({**draws, **b.parameters}) & ~failed if draws else np.zeros(held.n, dtype=bool)
        rate = pred["p_stopped"] * take
    k = int(actual.sum())
    low, high = clopper_pearson(k, held.n, confidence)
    return float(abs(np.mean(rate) - k / held.n) + max(k / held.n - low, high - k / held.n))


def _widen(est: Estimate, err_low: float, err_high: float) -> Estimate:
    low, high = max(0.0, est.low - err_low), min(1.0, est.high + err_high)
    verdict = Verdict.COMPOSES if low >= est.require else Verdict.BREAKS if high < est.require else Verdict.UNSURE
    return replace(est, low=low, high=high, verdict=verdict, more_episodes=None)


def _handoff_estimate(ctx: Any, p: _Particles, j: int, errors: list[float]) -> tuple[Estimate, float]:
    """Counts at handoff j (unknown particles: failures for the lower bound, successes for the upper)."""
    chain = ctx.chain
    reached, handed, unknown = p.reached[j], p.handed[j], p.unknown_at[j]
    known_ok = handed & ~unknown
    prefix = np.logical_and.reduce([h & ~u for h, u in zip(p.handed[: j + 1], p.unknown_at[: j + 1])])
    n = int(reached.sum())
    upper = bonferroni_confidence(chain.confidence, len(ctx.skills))
    est = estimate(int(known_ok.sum()), n, require=chain.require_handoff, confidence=chain.confidence, upper_confidence=upper,
                   low_from=(int(prefix.sum()), p.n))
    optimistic = estimate(min(n, int((handed | (unknown & reached)).sum())), n, require=chain.require_handoff,
                          confidence=chain.confidence, upper_confidence=upper)
    est = replace(est, high=optimistic.high)
    return _widen(est, sum(errors[: j + 1]), errors[j]), float(np.mean(unknown & reached)) if n else 0.0


def _evidence(ctx: Any, j: Handoff, p: _Particles, est: Estimate, outside: float, used: list[TaskModels], err: float) -> Evidence:
    b = ctx.target_skill(j)
    names = tuple(sorted(p.state))
    refused = np.flatnonzero(p.reached[j.index] & ~p.handed[j.index] & ~p.unknown_at[j.index])
    cex = tuple(
        counterexample_from(b.starts_when, p.state, int(r), parameters=b.parameters, names=names, source="model", confirmed=False,
                            note=f"option-model particle {int(r)}")
        for r in refused[: ctx.options.max_counterexamples]
    )
    fitted = ", ".join(tm.artifact for tm in used)
    task = used[0].task if used else {}
    verdict = est.verdict if outside <= MAX_UNSUPPORTED else Verdict.UNSURE
    why = "" if outside <= MAX_UNSUPPORTED else f"; {100 * outside:.1f}% of the queries lie outside the models' support, simulation decides"
    reason = (
        f"option models ({fitted}, fitted on {task.get('env')} / {task.get('variant')}): {est.k} of {est.n} particles of "
        f"{j.source} handed over to {j.target}; bounds widened by the models' held-out error {err:.3f}{why}"
    )
    rows = np.flatnonzero(p.reached[j.index])[:2000]
    return Evidence(
        "model", verdict, reason, estimate=est, candidates=cex,
        details={"particles": p.n, "outside_support": outside, "held_out_error": err, "models": [tm.artifact for tm in used], "task": task},
        points={k: v[rows] for k, v in p.state.items()}, accepted=p.handed[j.index][rows],
    )


def _errors(ctx: Any, used: list[TaskModels], rng: np.random.Generator) -> list[float]:
    """Held-out error per junction: 0 for the entry (exact), then one per modelled handoff."""
    out = [0.0]
    for i, tm in enumerate(used):
        b = ctx.skills[i + 1] if i + 1 < len(ctx.skills) else None
        out.append(held_out_error(tm, ctx.skills[i], b, ctx.chain.may_time_out[i], confidence=ctx.chain.confidence, rng=rng))
    return out


@checker_method("model", cost=20, summary="option models fitted on this task: particles through the chain, held-out error included")
def model_method(ctx: Any, junctions: list[Handoff]) -> dict[int, Evidence]:
    """Option models fitted on this task: particles through the chain, held-out error included."""
    rng = np.random.default_rng([ctx.seed, 104729])
    p, used, modelled = _propagate(ctx, len(ctx.skills), rng)
    errors = _errors(ctx, used, rng)
    out: dict[int, Evidence] = {}
    for j in junctions:
        if j.is_entry or j.index > modelled:
            continue
        est, outside = _handoff_estimate(ctx, p, j.index, errors)
        out[j.index] = _evidence(ctx, j, p, est, outside, used[: j.index], errors[j.index])
    if p.chain_ok is not None and modelled == len(ctx.skills):
        ok = p.chain_ok & ~p.unknown
        last = ctx.chain.chain_requirement
        est = estimate(int(ok.sum()), p.n, require=last, confidence=ctx.chain.confidence)
        est = _widen(est, sum(errors), sum(errors))
        if float(np.mean(p.unknown)) <= MAX_UNSUPPORTED:
            ctx.cache["model_chain"] = est
    return out
