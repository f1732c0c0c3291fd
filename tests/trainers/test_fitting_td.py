"""Intra-option TD (LSTD) fitting of option models from per-step data, against exact option models."""

from __future__ import annotations

import numpy as np
import pytest

from kinetome.trainers.fitting_td import StepTransitions, fit_td_models


def _geometric_transitions(n_episodes: int, b: float, r: float, seed: int) -> StepTransitions:
    """Per-step data of an option ending with probability b after each step; state x is noise."""
    rng = np.random.default_rng(seed)
    k = rng.geometric(b, size=n_episodes)
    t = int(k.sum())
    stopped = np.zeros(t, dtype=bool)
    stopped[np.cumsum(k) - 1] = True
    x = rng.normal(size=(t + 1, 2))
    return StepTransitions({"x": x[:-1]}, {"x": x[1:]}, np.full(t, r), stopped, np.zeros(t, bool), np.zeros(t, bool))


def test_lstd_geometric_option_matches_closed_forms() -> None:
    # Constant termination probability b (Sutton, Precup & Singh 1999, from memory; geometric
    # distribution): E[k] = 1/b, E[gamma^k] = b gamma / (1 - (1-b) gamma) = 0.908257,
    # R^o = r / (1 - gamma (1 - b)). 20k episodes ~ 200k transitions; the stop rate
    # estimate has sd ~ sqrt(b(1-b)/200k) = 0.00067 (0.7% of b), so 1% holds at ~1.5 sd
    # for E[k] and far tighter for the discounted heads.
    b, gamma, r = 0.1, 0.99, 2.0
    td = fit_td_models(_geometric_transitions(20_000, b, r, seed=1), features=("x",), gamma=gamma)
    start = {"x": np.zeros((3, 2))}
    pred = td.predict(start)
    np.testing.assert_allclose(pred["discount"], b * gamma / (1 - (1 - b) * gamma), rtol=0.01)
    np.testing.assert_allclose(pred["stop_discount"], pred["discount"], rtol=1e-9)
    np.testing.assert_allclose(pred["duration"], 1 / b, rtol=0.015)
    np.testing.assert_allclose(pred["discounted_return"], r / (1 - gamma * (1 - b)), rtol=0.01)
    np.testing.assert_allclose(pred["p_stopped"], 1.0, rtol=1e-6)


# A random walk on cells 0..5: 0 ends the turn by env termination, 5 by stops_when.
# From an inner cell i: to i-1 w.p. 0.3, stay w.p. 0.2, to i+1 w.p. 0.5. Reward r(i) = -0.1 i.
_MOVES = np.array([-1, 0, 1])
_PROBS = np.array([0.3, 0.2, 0.5])


def _exact_option_models(gamma: float) -> dict[str, np.ndarray]:
    """Solve the option-model Bellman equations (Sutton, Precup & Singh 1999, Sec. 5, from memory) exactly."""
    inner = np.arange(1, 5)
    p = np.zeros((4, 6))
    for row, i in enumerate(inner):
        for mv, pr in zip(_MOVES, _PROBS):
            p[row, i + mv] += pr
    q = p[:, 1:5]  # inner -> inner
    eye = np.eye(4)
    r = -0.1 * inner
    return {
        "duration": np.linalg.solve(eye - q, np.ones(4)),
        "discount": np.linalg.solve(eye - gamma * q, gamma * (p[:, 0] + p[:, 5])),
        "stop_discount": np.linalg.solve(eye - gamma * q, gamma * p[:, 5]),
        "p_stopped": np.linalg.solve(eye - q, p[:, 5]),
        "discounted_return": np.linalg.solve(eye - gamma * q, r),
    }


def _walk_transitions(n_episodes: int, seed: int, cap: int | None) -> StepTransitions:
    rng = np.random.default_rng(seed)
    cur, nxt, stop, term, trunc = [], [], [], [], []
    for _ in range(n_episodes):
        i = int(rng.integers(1, 5))
        for t in range(10_000):
            j = i + int(rng.choice(_MOVES, p=_PROBS))
            cur.append(i)
            nxt.append(j)
            stop.append(j == 5)
            term.append(j == 0)
            cut = cap is not None and t + 1 >= cap and 0 < j < 5
            trunc.append(cut)
            if j in (0, 5) or cut:
                break
            i = j
    cur, nxt = np.array(cur), np.array(nxt)
    onehot = np.eye(6)[:, 1:5]  # cells 0 and 5 are never starts: all-zero features
    return StepTransitions(
        {"cell": onehot[cur]}, {"cell": onehot[nxt]}, -0.1 * cur.astype(float),
        np.array(stop), np.array(term), np.array(trunc),
    )


@pytest.mark.parametrize("cap", [None, 3])
def test_lstd_random_walk_matches_exact_option_models(cap: int | None) -> None:
    # Tabular (one-hot) features: LSTD is the certainty-equivalence solution, so it
    # converges to the exact option models. Measured over 20 seeds at 3000 episodes, the
    # per-cell relative sd was <= 2.6% (uncapped) and <= 4.6% (capped, fewer transitions);
    # at 8000 episodes that is <= 1.6% / 2.8%, so the 8% tolerance is ~3 sd at worst (common practice).
    # cap = 3 cuts every turn after 3 steps (truncated, bootstrapped): TD still
    # recovers the uncapped option, which Monte Carlo regression on capped turns cannot.
    gamma = 0.9
    data = _walk_transitions(8000, seed=2, cap=cap)
    td = fit_td_models(data, features=("cell",), gamma=gamma)
    exact = _exact_option_models(gamma)
    pred = td.predict({"cell": np.eye(4)})
    for name, value in exact.items():
        np.testing.assert_allclose(pred[name], value, rtol=0.08, err_msg=name)


BAD = [
    (dict(reward=np.zeros((2, 2))), "reward must have shape (T,) with T >= 1, got (2, 2)"),
    (dict(stopped=np.zeros(3)), "stopped must be a bool array of shape (3,), got float64 (3,)"),
    (dict(stopped=np.ones(3, bool), terminated=np.ones(3, bool)), "a transition cannot be both stopped and terminated, got 3"),
    (dict(state={"x": np.zeros((2, 1))}), "state quantities must have T=3 rows, got {'x': (2, 1)}"),
]


@pytest.mark.parametrize("change, expected", BAD)
def test_step_transitions_validate(change: dict, expected: str) -> None:
    args = dict(
        state={"x": np.zeros((3, 1))}, next_state={"x": np.zeros((3, 1))}, reward=np.zeros(3),
        stopped=np.zeros(3, bool), terminated=np.zeros(3, bool), truncated=np.zeros(3, bool),
    )
    args.update(change)
    with pytest.raises(ValueError) as info:
        StepTransitions(**args)
    assert expected in str(info.value)
