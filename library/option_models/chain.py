"""Chain prediction from option models: propagate sampled end states through consecutive skills.

For skills 1..n with start state s_1 and, per skill i, the models
K_i(s) = E[k], P_i(s) = P(stopped), D_i(s) = E[gamma^k 1{stopped}] and
R_i(s) = E[discounted return], each particle draws s_{i+1} from skill i's
end-state model and accumulates (the option-model composition of Sutton,
Precup & Singh, 1999, with the end state and the duration assumed
independent given the start state and a stop):

    steps  = sum_i  W_i K_i(s_i),           W_1 = 1,  W_{i+1} = W_i P_i(s_i) a_i
    return = sum_i  G_i R_i(s_i),           G_1 = 1,  G_{i+1} = G_i D_i(s_i) a_i

where a_i = accepts_i(s_{i+1}) is 1 if the next skill's initiation set holds
(a refused handoff ends the chain) and 1 when no predicate is given. Each
particle's values are expectations over the skills' outcomes given its sampled
states, so the reported spread (std across particles, standard error of the
mean) is that of the start states and the sampled end states.
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
        return cls(float(np.mean(values)), std, std / np.sqrt(n) if n > 0 else 0.0, n)


@dataclass(frozen=True)
class HandoffPrediction:
    """Handoff ``index`` -> ``index + 1``: how often it happens and how often the next skill accepts.

    ``accepted`` is the fraction of sampled stopped end states the next skill's
    ``accepts`` admits, weighted by how likely each particle's handoff is;
    ``se`` uses the effective sample size of those weights. None when no
    predicate was given or the handoff never happens.
    """

    index: int
    reach: float  # probability the earlier skill stops (the handoff is offered)
    accepted: float | None
    se: float | None
    effective_n: float


@dataclass(frozen=True)
class ChainPrediction:
    """Predicted duration, return and success of a chain from its skills' option models."""

    steps: Estimate  # expected total env steps
    discounted_return: Estimate  # expected sum over skills of prod(previous discounts) * return
    discount: Estimate  # E[gamma^(total steps) * 1{every skill stopped}]
    success: Estimate  # probability every skill stops and every handoff is accepted
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
        if a.end_state is None:
            continue  # never stops in the data: the chain ends at skill i
        missing = [q for q in b.features if q not in a.end_state.quantities]
        if missing:
            raise ValueError(
                f"skill {i + 2} ({b.meta.skill_ref}) reads start quantities {missing} that skill {i + 1} "
                f"({a.meta.skill_ref})'s end-state model does not predict (it has {list(a.end_state.quantities)}); "
                f"refit skill {i + 1} with end_quantities including {missing}"
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
    if ok.shape != (batch,) or ok.dtype != np.bool_:
        raise ValueError(f"accepts for handoff {index + 1} must return a ({batch},) bool array, got {ok.dtype} {ok.shape}")
    return ok


def predict_chain(
    models: Sequence[OptionModels],
    start_states: Mapping[str, np.ndarray],
    *,
    rng: np.random.Generator,
    samples: int = 1,
    accepts: Sequence[Accepts | None] | None = None,
) -> ChainPrediction:
    """Predict a chain of skills from ``start_states`` (name -> (B, *shape)).

    ``samples`` particles per start state; ``accepts[i]`` tests the sampled
    end states of skill i+1 against skill i+2's initiation set
    (``values -> (B,) bool``, e.g. a parsed ``starts_when``).
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
    steps = np.zeros(batch)
    ret = np.zeros(batch)
    reach: list[float] = []
    handoffs: list[HandoffPrediction] = []
    for i, m in enumerate(models):
        reach.append(float(np.mean(reach_w)))
        dur = m.duration.predict(state)
        steps += reach_w * dur["steps"]
        ret += carry * m.reward.expected_return(state)
        stop_w = reach_w * dur["p_stopped"]
        stop_d = carry * dur["handoff_discount"]
        if i == len(models) - 1:
            reach_w, carry = stop_w, stop_d
            break
        if m.end_state is None:
            handoffs.append(HandoffPrediction(i + 1, float(np.mean(stop_w)), None, None, 0.0))
            reach_w, carry = np.zeros(batch), np.zeros(batch)
            continue
        draws = m.end_state.sample(state, rng, 1)
        nxt = {k: v[:, 0] for k, v in draws.items()}
        if accepts_list[i] is not None:
            ok = _accepted(accepts_list[i], nxt, i, batch)
            w_sum = float(np.sum(stop_w))
            if w_sum > 0:
                frac = float(np.sum(stop_w * ok) / w_sum)
                ess = w_sum**2 / float(np.sum(stop_w**2))
                handoffs.append(HandoffPrediction(i + 1, float(np.mean(stop_w)), frac, float(np.sqrt(frac * (1 - frac) / ess)), ess))
            else:
                handoffs.append(HandoffPrediction(i + 1, 0.0, None, None, 0.0))
            stop_w = stop_w * ok
            stop_d = stop_d * ok
        else:
            handoffs.append(HandoffPrediction(i + 1, float(np.mean(stop_w)), None, None, 0.0))
        reach_w, carry, state = stop_w, stop_d, nxt
    return ChainPrediction(
        steps=Estimate.of(steps),
        discounted_return=Estimate.of(ret),
        discount=Estimate.of(carry),
        success=Estimate.of(reach_w),
        reach=tuple(reach),
        handoffs=tuple(handoffs),
    )
