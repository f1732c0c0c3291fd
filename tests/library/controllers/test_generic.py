"""Generic contract tests: every example controller of every kind goes through each of them."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from kinetome.library.controllers import check_controller, controller_kinds, load_parameters, save_parameters

from .examples import EXAMPLES, TINY, example_ids, extreme_states, tiny_states

pytestmark = pytest.mark.parametrize("example", EXAMPLES, ids=example_ids())


def test_examples_cover_every_kind(example):
    # A new kind must add an example so these generic checks reach it.
    assert set(controller_kinds()) <= {e.kind for e in EXAMPLES}


def test_shapes_and_dtypes(example):
    c = example.build()
    states = tiny_states(6, seed=1)
    t = np.linspace(0.0, 1.0, 6)
    assert all(name in TINY.layout for name in c.inputs)
    assert c.kind == example.kind
    mean = c.mean({k: torch.from_numpy(v) for k, v in states.items()}, torch.from_numpy(t))
    assert mean.shape == (6, TINY.n_act) and mean.dtype == torch.float64
    dist = c.distribution(states, t)
    assert dist.batch_shape == (6, TINY.n_act)
    action = c.act(states, t)
    assert action.shape == (6, TINY.n_act) and action.dtype == np.float64
    assert c.log_std.shape == (TINY.n_act,)
    assert isinstance(c.log_std, torch.nn.Parameter)


def test_actions_clipped_to_actuator_limits_for_extreme_states(example):
    c = example.build()
    states = extreme_states(32, seed=2)
    t = np.full(32, 1e6)
    for explore in (False, True):
        a = c.act(states, t, explore=explore, generator=torch.Generator().manual_seed(0))
        assert np.all(np.isfinite(a))
        assert np.all(a >= TINY.action_low) and np.all(a <= TINY.action_high)
    with torch.no_grad():
        raw = c.mean(states, t).numpy()
    clipped = c.act(states, t)
    # Where the raw mean leaves the range the action sits exactly on the limit.
    assert np.array_equal(clipped, np.clip(raw, TINY.action_low, TINY.action_high))


def test_deterministic_for_a_seed(example):
    c = example.build()
    states, t = tiny_states(10, seed=3), np.linspace(0, 2, 10)
    a1 = c.act(states, t, explore=True, generator=torch.Generator().manual_seed(7))
    a2 = c.act(states, t, explore=True, generator=torch.Generator().manual_seed(7))
    a3 = c.act(states, t, explore=True, generator=torch.Generator().manual_seed(8))
    assert np.array_equal(a1, a2)
    assert not np.array_equal(a1, a3)
    assert np.array_equal(c.act(states, t), c.act(states, t))


@pytest.mark.parametrize("batch", [1, 2, 7, 64, 300])
def test_batched_equals_row_by_row_bit_for_bit(example, batch):
    c = example.build()
    states, t = tiny_states(batch, seed=4), np.random.default_rng(5).uniform(0, 3, batch)
    together = c.act(states, t)
    rows = np.concatenate([c.act({k: v[i : i + 1] for k, v in states.items()}, t[i : i + 1]) for i in range(batch)])
    assert together.tobytes() == rows.tobytes()


def test_safetensors_round_trip_bit_for_bit(example):
    c = example.build()
    with torch.no_grad():
        for p in c.parameters():  # move off the defaults so the test sees real values
            p.add_(torch.linspace(-1e-3, 1e-3, p.numel(), dtype=torch.float64).reshape(p.shape))
    c.project_()
    data = save_parameters(c)
    assert isinstance(data, bytes)
    loaded = load_parameters(data, kind=example.kind)
    values = c.parameter_values()
    assert list(sorted(loaded)) == list(sorted(values))
    for name in values:
        assert loaded[name].shape == values[name].shape
        assert loaded[name].tobytes() == values[name].tobytes(), name
    fresh = example.build()
    fresh.load_values(loaded)
    states, t = tiny_states(9, seed=6), np.linspace(0, 1, 9)
    assert fresh.act(states, t).tobytes() == c.act(states, t).tobytes()


def test_project_restores_bounds_after_out_of_bounds_step(example):
    c = example.build()
    states, t = tiny_states(16, seed=7), np.linspace(0, 1, 16)
    actions = torch.from_numpy(c.act(states, t, explore=True, generator=torch.Generator().manual_seed(1)))
    loss = -c.distribution(states, t).log_prob(actions).sum()
    loss.backward()
    trainable = list(c.parameters())
    assert all(p.grad is not None for p in trainable), "every trainable parameter must get a gradient"
    with torch.no_grad():
        for p in trainable:  # a huge step in the sign of the gradient, then past the bounds for good measure
            p.sub_(1e6 * torch.sign(p.grad) + 1e6)
    bounds = c.parameter_bounds()
    assert any(np.any(v < bounds[k][0]) for k, v in c.parameter_values().items())
    c.project_()
    for name, value in c.parameter_values().items():
        low, high = bounds[name]
        assert np.all(value >= low) and np.all(value <= high), name


def test_project_leaves_in_bound_values_alone(example):
    c = example.build()
    before = c.parameter_values()
    c.project_()
    after = c.parameter_values()
    assert all(before[k].tobytes() == after[k].tobytes() for k in before)


def test_check_controller_passes(example):
    c = example.build()
    assert check_controller(c, states=tiny_states(12, seed=8), seed=0) == []
    assert check_controller(c, states=tiny_states(3, seed=9), seed=123) == []


def test_fixed_parameters_are_not_trained(example):
    c = example.build()
    trainable = {name.split(".")[-1] for name, _ in c.named_parameters()}
    declared = {d.name for d in c.declarations}
    fixed = {d.name for d in c.declarations if not d.trainable}
    assert trainable == declared - fixed
    assert "log_std" in trainable
