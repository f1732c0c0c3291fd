"""check_controller flags each broken promise it claims to check."""

from __future__ import annotations

import numpy as np
import torch

from kinetome.library.controllers import check_controller

from .examples import EXAMPLES, tiny_states


def _pd():
    return EXAMPLES[0].build()


def test_flags_batch_dependent_output():
    c = _pd()
    original = c._mean
    c._mean = lambda x, t: original(x, t) + 1e-12 * x["qpos"].shape[0]  # type: ignore[method-assign]
    problems = check_controller(c, states=tiny_states(5, seed=0), seed=0)
    assert any(p.startswith("batched actions differ from row-by-row actions") for p in problems)


def test_flags_nondeterministic_output():
    c = _pd()
    original = c._mean
    c._mean = lambda x, t: original(x, t) + 1e-3 * torch.rand(1, dtype=torch.float64)  # type: ignore[method-assign]
    problems = check_controller(c, states=tiny_states(5, seed=0), seed=0)
    assert "act is not deterministic: two calls on the same states differ" in problems


def test_flags_non_finite_actions():
    c = _pd()
    original = c._mean
    c._mean = lambda x, t: original(x, t) * torch.nan  # type: ignore[method-assign]
    problems = check_controller(c, states=tiny_states(4, seed=0), seed=0)
    assert "act returned non-finite actions in rows [0, 1, 2, 3]" in problems


def test_flags_a_project_that_does_not_clamp():
    c = _pd()
    c.project_ = lambda: c  # type: ignore[method-assign]
    problems = check_controller(c, states=tiny_states(4, seed=0), seed=0)
    assert "parameter 'kp' is outside its bounds after project_()" in problems


def test_flags_missing_inputs_and_too_small_batches():
    c = EXAMPLES[1].build()  # task_pd
    states = tiny_states(4, seed=0)
    del states["fingertip_jac"]
    assert check_controller(c, states=states, seed=0) == ["states must hold 'fingertip_jac', which the controller reads"]
    one = {k: v[:1] for k, v in tiny_states(1, seed=0).items()}
    assert check_controller(c, states=one, seed=0) == [
        "states must hold at least 2 rows to compare batched and row-by-row actions, got 1"
    ]


def test_does_not_change_the_controller():
    c = _pd()
    before = c.parameter_values()
    assert check_controller(c, states=tiny_states(6, seed=1), seed=3) == []
    after = c.parameter_values()
    assert all(np.array_equal(before[k], after[k]) for k in before)
