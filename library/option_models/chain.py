"""Chain prediction from option models: propagate sampled end states through consecutive skills.

The runtime hands over to the next skill after a stop or a timeout (an env
termination ends the episode), and the next skill refuses a start outside its
``starts_when``. For skills 1..n with start state s_1 and, per skill i,
K_i(s) = E[k], R_i(s) = E[discounted return], p_b(s) = P(outcome b) and
d_b(s) = E[gamma^k 1{outcome b}] for b in {stopped, timed_out}, each particle
picks an outcome b with probability q_b = p_b / (p_stopped + p_timed_out),
draws s_{i+1} from that outcome's end-state model and accumulates

    steps  += W_i K_i(s_i),     W_{i+1} = W_i (p_stopped + p_timed_out) a_i
    return += G_i R_i(s_i),     G_{i+1} = G_i d_b / q_b a_i

(W_1 = G_1 = 1; a_i = accepts_i(s_{i+1}), 1 without a predicate). In
expectation over b this is the option-model composition of Sutton, Precup &
Singh (1999): sum_b d_b E[R_{i+1}(s') | b], with the end state and the
duration assumed independent given the start state and the outcome. An
outcome without an end-state model (too few such episodes to fit one) ends
the chain; its probability is reported as ``unmodelled``.

Each particle's values are expectations over the skills' durations given its
sampled states and outcomes, so the reported spread (std across particles,
standard error of the mean) is that of the start states, outcomes and end
states drawn.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np

from .bundle import OptionModels

__all__ = ["Estimate", "HandoffPrediction", "ChainPrediction", "predict_chain"]

Accepts = Callable[[Mapping[str, np.ndarray]], np.ndarray]


@dataclass(frozen=True)
class Estimate:
    """A Monte Carlo estimate: mean, spread across particles, standard error of the mean."""

    mean: float
    std: float
    se: float
    n: int

    @classmethod
    def of(cls, values: np.ndarray) -> "Estimate":
        n = int(values.size)
        std = float(np.std(values, ddof=1)) if n > 1 else 0.0
        return cls(float(np.mean(values)), std, float(std / np.sqrt(n)) if n > 0 else 0.0, n)


@dataclass(frozen=True)
class HandoffPrediction:
    """Handoff ``index`` -> ``index + 1`` (1-based skills): how often it happens and is accepted.

    ``reach``: probability the handoff is offered (skill ``index`` ran and
    stopped or timed out, with an end-state model for that outcome);
    ``after_stop``: the share of offered handoffs that follow a stop.
    ``accepted``: fraction of offered handoffs whose sampled end state the next
    skill's predicate admits, weighted by each particle's probability of
    getting there (``se`` from the effective sample size of the weights);
    ``accepted_after_stop``: the same over handoffs after a stop only. Both
    None without a predicate or when nothing is offered. ``unmodelled``:
    probability of a stop/timeout whose end-state model is missing.
    """

    index: int
    reach: float
    after_stop: float | None
    accepted: float | None
    se: float | None
    accepted_after_stop: float | None
    effective_n: float
    unmodelled: float


@dataclass(frozen=True)
class ChainPrediction:
    """Predicted duration, return and success of a chain from its skills' option models."""

    steps: Estimate  # expected total env steps
    discounted_return: Estimate  # expected sum over skills of prod(previous discounts) * return
    discount: Estimate  # E[gamma^(total steps) * 1{the last skill handed over}]
    success: Estimate  # probability every skill stops (and every handoff is accepted)
    reach: tuple[float, ...]  # probability that skill i runs
    handoffs: tuple[HandoffPrediction, ...]


def _check_chain(models: Sequence[OptionModels], accepts: Sequence[Accepts | None] | None) -> list[Accepts | None]:
    if len(models) < 1:
        raise ValueError("a chain needs at least one skill's models, got none")
    gammas = {m.gamma for m in models}
    if len(gammas) != 1:
        raise ValueError(
            f"every skill's models must share one gamma to compose discounts, got {[m.gamma for m in models]}; "
            "refit with one gamma"
        )
    for i in range(len(models) - 1):
        a, b = models[i], models[i + 1]
        for outcome, end_model in a.end_states().items():
            missing = [q for q in b.features if q not in end_model.quantities]
            if missing:
                raise ValueError(
                    f"skill {i + 2} ({b.meta.skill_ref}) reads start quantities {missing} that skill {i + 1} "
                    f"({a.meta.skill_ref})'s {outcome} end-state model does not predict (it has "
                    f"{list(end_model.quantities)}); refit skill {i + 1} with end_quantities including {missing}"
                )
    n_handoffs = len(models) - 1
    if accepts is None:
        return [None] * n_handoffs
    accepts = list(accepts)
    if len(accepts) != n_handoffs:
        raise ValueError(f"accepts must give one callable (or None) per handoff ({n_handoffs}), got {len(accepts)}")
    return accepts


def _accepted(fn: Accepts, values: dict[str, np.ndarray], index: int, batch: int) -> np.ndarray:
    try:
        ok = np.asarray(fn(values))
    except KeyError as exc:
        raise ValueError(
            f"accepts for handoff {index + 1} read {exc.args[0]!r}, which the end-state model does not predict "
            f"(it has {sorted(values)}); refit with end_quantities including it"
        ) from None
    except ValueError as exc:  # e.g. a predicate naming a quantity that is not there
        raise ValueError(
            f"accepts for handoff {index + 1} failed on sampled end states with {sorted(values)}: {exc}"
        ) from None
    if ok.shape != (batch,) or ok.dtype != np.bool_:
        raise ValueError(f"accepts for handoff {index + 1} must return a ({batch},) bool array, got {ok.dtype} {ok.shape}")
    return ok


def _weighted_fraction(weights: np.ndarray, ok: np.ndarray) -> tuple[float | None, float | None, float]:
    total = float(np.sum(weights))
    if total <= 0:
        return None, None, 0.0
    frac = float(np.sum(weights * ok) / total)
    ess = total**2 / float(np.sum(weights**2))
    return frac, float(np.sqrt(frac * (1.0 - frac) / ess)), ess


def _draw_end_states(m: OptionModels, state: dict[str, np.ndarray], stop_branch: np.ndarray, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """One end state per particle from the end-state model of its outcome."""
    batch = stop_branch.shape[0]
    out: dict[str, np.ndarray] = {}
    for outcome, rows in (("stopped", np.flatnonzero(stop_branch)), ("timed_out", np.flatnonzero(~stop_branch))):
        model = m.end_states().get(outcome)
        if model is None or rows.size == 0:
            continue
        draws = model.sample({k: v[rows] for k, v in state.items()}, rng, 1)
        for k, v in draws.items():
            if k not in out:
                out[k] = np.zeros((batch, *v.shape[2:]))
            out[k][rows] = v[:, 0]
    if not out:  # no particle hands over: keep shapes from any model
        model = next(iter(m.end_states().values()))
        out = {q: np.zeros((batch, *s)) for q, s in zip(model.quantities, model.shapes)}
    return out


def predict_chain(
    models: Sequence[OptionModels],
    start_states: Mapping[str, np.ndarray],
    *,
    rng: np.random.Generator,
    samples: int = 1,
    accepts: Sequence[Accepts | None] | None = None,
    handoff_after_timeout: bool = True,
) -> ChainPrediction:
    """Predict a chain of skills from ``start_states`` (name -> (B, *shape)).

    ``samples`` particles per start state. ``accepts[i]`` tests sampled end
    states of skill i+1 against skill i+2's initiation set (``values -> (B,)
    bool``, e.g. a parsed ``starts_when``). ``handoff_after_timeout=False``
    ends the chain at a timeout (only stops hand over).
    """
    accepts_list = _check_chain(models, accepts)
    if int(samples) < 1:
        raise ValueError(f"samples (particles per start state) must be >= 1, got {samples}")
    state = {k: np.repeat(np.asarray(v, dtype=np.float64), int(samples), axis=0) for k, v in start_states.items()}
    batch = next(iter(state.values())).shape[0] if state else 0
    if batch == 0:
        raise ValueError("start_states must hold at least one start state, got an empty batch")
    reach_w = np.ones(batch)  # W_i: probability skill i runs
    carry = np.ones(batch)  # G_i: expected discount carried into skill i
    all_stopped = np.ones(batch, dtype=bool)  # every earlier outcome drawn was a stop
    steps = np.zeros(batch)
    ret = np.zeros(batch)
    reach: list[float] = []
    handoffs: list[HandoffPrediction] = []
    success = np.zeros(batch)
    for i, m in enumerate(models):
        reach.append(float(np.mean(reach_w)))
        dur = m.duration.predict(state)
        steps += reach_w * dur["duration"]
        ret += carry * m.reward.expected_return(state)
        success = reach_w * dur["p_stopped"] * all_stopped
        ends = m.end_states()
        p_s = dur["p_stopped"]
        d_s = dur["stop_discount"]
        p_t = dur["p_timed_out"] if handoff_after_timeout else np.zeros(batch)
        d_t = dur["timeout_discount"] if handoff_after_timeout else np.zeros(batch)
        if i == len(models) - 1:
            carry = carry * (d_s + d_t)
            break
        lost = reach_w * (p_s * ("stopped" not in ends) + p_t * ("timed_out" not in ends))
        if "stopped" not in ends:
            p_s, d_s = np.zeros(batch), np.zeros(batch)
        if "timed_out" not in ends:
            p_t, d_t = np.zeros(batch), np.zeros(batch)
        total = p_s + p_t
        q_s = np.divide(p_s, total, out=np.zeros(batch), where=total > 0)
        stop_branch = rng.random(batch) < q_s
        q_b = np.where(stop_branch, q_s, 1.0 - q_s)
        d_b = np.where(stop_branch, d_s, d_t)
        offered_w = reach_w * total
        if not ends:
            nxt = state
        else:
            nxt = _draw_end_states(m, state, stop_branch, rng)
        next_carry = carry * np.divide(d_b, q_b, out=np.zeros(batch), where=q_b > 0)
        ok = np.ones(batch, dtype=bool)
        frac = se = frac_stop = None
        ess = 0.0
        if accepts_list[i] is not None and ends:
            ok = _accepted(accepts_list[i], nxt, i, batch)
            frac, se, ess = _weighted_fraction(offered_w, ok)
            frac_stop, _, _ = _weighted_fraction(offered_w * stop_branch, ok)
        w_sum = float(np.sum(offered_w))
        after_stop = float(np.sum(offered_w * stop_branch) / w_sum) if w_sum > 0 else None
        handoffs.append(HandoffPrediction(i + 1, float(np.mean(offered_w)), after_stop, frac, se, frac_stop, ess, float(np.mean(lost))))
        reach_w = offered_w * ok
        carry = next_carry * ok
        all_stopped = all_stopped & stop_branch
        state = nxt
    return ChainPrediction(
        steps=Estimate.of(steps),
        discounted_return=Estimate.of(ret),
        discount=Estimate.of(carry),
        success=Estimate.of(success),
        reach=tuple(reach),
        handoffs=tuple(handoffs),
    )
