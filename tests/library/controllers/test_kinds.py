"""Closed-form checks of each kind against its formula on hand-computed values."""

from __future__ import annotations

import math

import numpy as np
import pytest
import torch

from kinetome.library.controllers import build_controller, kind_class, log_std_decl
from kinetome.library.controllers.mlp import init_weights

from .examples import TINY, tiny_states


def _state(qpos, qvel, **extra):
    out = {"qpos": np.atleast_2d(np.asarray(qpos, dtype=float)), "qvel": np.atleast_2d(np.asarray(qvel, dtype=float))}
    out.update({k: np.asarray(v, dtype=float) for k, v in extra.items()})
    return out


def test_joint_pd_matches_hand_values():
    c = build_controller(
        "joint_pd", TINY,
        parameters={"setpoint": [1.0, -0.5], "kp": [2.0, 4.0], "kd": [0.5, 1.0], "bias": [0.25, 0.0]},
    )
    # joint 1 is unactuated: its values must not matter.
    s = _state([0.5, 9.0, -0.25], [2.0, -9.0, 0.5])
    # u0 = 2 (1 - 0.5) - 0.5 * 2 + 0.25 = 0.25 ; u1 = 4 (-0.5 + 0.25) - 1 * 0.5 = -1.5 (worked by hand)
    mean = c.mean(s, np.zeros(1)).detach().numpy()
    assert mean.tolist() == [[0.25, -1.5]]
    assert c.act(s, np.zeros(1)).tolist() == [[0.25, -1.5]]


def test_joint_pd_equals_formula_on_a_batch():
    p = {"setpoint": [0.3, -0.2], "kp": [5.0, 3.0], "kd": [0.5, 0.2], "bias": [0.1, -0.1]}
    c = build_controller("joint_pd", TINY, parameters=p)
    s = tiny_states(50, seed=11)
    q, qd = s["qpos"][:, [0, 2]], s["qvel"][:, [0, 2]]
    expected = np.asarray(p["kp"]) * (np.asarray(p["setpoint"]) - q) - np.asarray(p["kd"]) * qd + np.asarray(p["bias"])
    assert np.array_equal(c.mean(s, np.zeros(50)).detach().numpy(), expected)


def test_task_pd_matches_jacobian_transpose_formula():
    p = {"setpoint": [0.1, 0.2, 0.05], "kp": [10.0, 20.0, 5.0], "kd": [1.0, 2.0, 0.5],
         "joint_damping": [0.1, 0.3], "bias": [0.05, -0.05]}
    c = build_controller("task_pd", TINY, parameters=p)
    s = tiny_states(20, seed=12)
    f = np.asarray(p["kp"]) * (np.asarray(p["setpoint"]) - s["fingertip"]) - np.asarray(p["kd"]) * s["fingertip_vel"]
    jac = s["fingertip_jac"][:, :, [0, 2]]  # actuated columns only
    expected = np.einsum("bri,br->bi", jac, f) - np.asarray(p["joint_damping"]) * s["qvel"][:, [0, 2]] + np.asarray(p["bias"])
    np.testing.assert_allclose(c.mean(s, np.zeros(20)).detach().numpy(), expected, rtol=0, atol=1e-13)
    # The unactuated column of the Jacobian is ignored.
    s2 = {**s, "fingertip_jac": s["fingertip_jac"].copy()}
    s2["fingertip_jac"][:, :, 1] = 1e3
    assert np.array_equal(c.act(s2, np.zeros(20)), c.act(s, np.zeros(20)))


def test_linear_matches_formula_and_flattens_in_listed_order():
    rng = np.random.default_rng(13)
    gain = rng.normal(size=(2, 7))
    ref = rng.normal(size=7) * 0.1
    c = build_controller("linear", TINY, parameters={"gain": gain, "reference": ref, "bias": [0.2, -0.3]},
                         settings={"inputs": ["qvel", "torso_height", "qpos"]})
    assert c.inputs == ("qvel", "torso_height", "qpos")
    s = tiny_states(40, seed=14)
    flat = np.concatenate([s["qvel"], s["torso_height"][:, None], s["qpos"]], axis=1)
    expected = (flat - ref) @ gain.T + np.array([0.2, -0.3])
    # BLAS sums in its own order, so equality to rounding only (1e-12 >> 7 terms x eps).
    np.testing.assert_allclose(c.mean(s, np.zeros(40)).detach().numpy(), expected, rtol=0, atol=1e-12)


def test_linear_reference_bounds_come_from_the_layout_envelope():
    c = build_controller("linear", TINY, settings={"inputs": ["qpos", "qvel"]})
    low, high = c.parameter_bounds()["reference"]
    assert low[:3].tolist() == [-1.0, -2.0, -3.0] and high[:3].tolist() == [1.0, 2.0, 3.0]
    assert low[3:].tolist() == [-1000.0] * 3  # no envelope for qvel: the wide fallback


def _numpy_mlp(values, s, hidden, activation):
    z = (s - values["input_mean"]) / values["input_std"]
    n = len(hidden) + 1
    for i in range(n):
        z = z @ values[f"w{i}"].T + values[f"b{i}"]
        if i < n - 1:
            z = np.tanh(z) if activation == "tanh" else np.maximum(z, 0.0)
    return TINY.action_mid + TINY.action_half_range * np.tanh(z)


@pytest.mark.parametrize("activation", ["tanh", "relu"])
def test_mlp_matches_numpy_reference_and_stays_in_range(activation):
    c = build_controller("mlp", TINY, settings={"hidden": [16, 8], "activation": activation, "init_seed": 5})
    with torch.no_grad():  # large weights so the output explores the whole range
        for name, p in c.p.items():
            if name.startswith("w"):
                p.mul_(40.0 if name == "w2" else 3.0)
    c.project_()
    s = tiny_states(200, seed=15, scale=3.0)
    flat = np.concatenate([s["qpos"], s["qvel"]], axis=1)
    out = c.mean(s, np.zeros(200)).detach().numpy()
    np.testing.assert_allclose(out, _numpy_mlp(c.parameter_values(), flat, (16, 8), activation), rtol=0, atol=1e-12)
    assert np.all(out >= TINY.action_low) and np.all(out <= TINY.action_high)
    assert out[:, 1].max() - out[:, 1].min() > 2.0, "the test weights should sweep most of the [-2, 3] range"


def test_mlp_initialisation_is_deterministic_per_seed():
    a = build_controller("mlp", TINY, settings={"init_seed": 4}).parameter_values()
    b = build_controller("mlp", TINY, settings={"init_seed": 4}).parameter_values()
    d = build_controller("mlp", TINY, settings={"init_seed": 5}).parameter_values()
    assert all(a[k].tobytes() == b[k].tobytes() for k in a)
    assert not np.array_equal(a["w0"], d["w0"])
    init = init_weights(6, (64, 64), 2, 4)
    assert np.array_equal(a["w1"], init["w1"])
    assert a["w0"].shape == (64, 6) and a["w2"].shape == (2, 64) and a["b2"].shape == (2,)
    # orthogonal by default: orthonormal columns/rows times sqrt(2) in hidden layers, 0.01 in the last
    # (the defining property of torch.nn.init.orthogonal_; gains as common practice for the clipped objective)
    np.testing.assert_allclose(a["w0"].T @ a["w0"], 2.0 * np.eye(6), atol=1e-12)
    np.testing.assert_allclose(a["w1"] @ a["w1"].T, 2.0 * np.eye(64), atol=1e-12)
    np.testing.assert_allclose(a["w2"] @ a["w2"].T, 1e-4 * np.eye(2), atol=1e-15)
    u = build_controller("mlp", TINY, settings={"init_seed": 4, "init": "uniform"}).parameter_values()
    assert np.all(np.abs(u["w0"]) <= 1 / math.sqrt(6)) and not np.allclose(u["w0"].T @ u["w0"], 2.0 * np.eye(6), atol=0.1)
    with pytest.raises(Exception, match="init"):
        build_controller("mlp", TINY, settings={"init": "xavier"})
    # Small last layer: the initial mean sits near the middle of the action range.
    out = build_controller("mlp", TINY, settings={"init_seed": 4}).mean(tiny_states(30, seed=1), np.zeros(30)).detach().numpy()
    assert np.all(np.abs(out - TINY.action_mid) < 0.1 * TINY.action_half_range)


def test_mlp_input_normaliser_is_stored_but_not_trained():
    c = build_controller("mlp", TINY, settings={"hidden": [4]})
    names = {n.split(".")[-1] for n, _ in c.named_parameters()}
    assert "input_mean" not in names and "input_std" not in names
    assert {"input_mean", "input_std"} <= set(c.parameter_values())
    s = tiny_states(5, seed=2)
    shifted = {**s, "qpos": s["qpos"] + 1.0}
    c2 = build_controller("mlp", TINY, settings={"hidden": [4]}, parameters={"input_mean": [1.0, 1.0, 1.0, 0, 0, 0]})
    np.testing.assert_array_equal(c2.act(shifted, np.zeros(5)), c.act(s, np.zeros(5)))


def _cpg(**override):
    p = {"frequency": 2.0, "amplitude": [0.3, 0.5], "phase": [0.0, 0.5], "offset": [0.1, -0.2], "kp": [4.0, 2.0], "kd": [0.0, 0.0]}
    p.update(override)
    return build_controller("cpg", TINY, parameters=p), p


def test_cpg_targets_at_zero_and_quarter_period():
    c, p = _cpg()
    t = torch.tensor([0.0, 1.0 / (4.0 * p["frequency"])], dtype=torch.float64)
    q_star = c.joint_targets(t).detach().numpy()
    # t = 0: offset + amplitude sin(phase); t = 1/(4f): offset + amplitude sin(pi/2 + phase) = ... cos(phase)
    expected0 = np.array(p["offset"]) + np.array(p["amplitude"]) * np.sin(p["phase"])
    expected1 = np.array(p["offset"]) + np.array(p["amplitude"]) * np.cos(p["phase"])
    np.testing.assert_allclose(q_star[0], expected0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(q_star[1], expected1, rtol=0, atol=1e-15)
    assert q_star[1, 0] == pytest.approx(0.1 + 0.3, abs=1e-15)  # phase 0: the top of the swing


def test_cpg_action_tracks_the_oscillator_and_repeats_each_period():
    c, p = _cpg(kd=[0.5, 0.25], kp=[1.0, 2.0])
    s = _state(np.zeros((3, 3)), np.ones((3, 3)))
    period = 1.0 / p["frequency"]
    t = np.array([0.1, 0.1 + period, 0.1 + 5 * period])
    u = c.act(s, t)
    q_star = 0.1 + 0.3 * math.sin(2 * math.pi * 2.0 * 0.1)
    assert u[0, 0] == pytest.approx(1.0 * q_star - 0.5, abs=1e-14)
    np.testing.assert_allclose(u[1:], np.broadcast_to(u[0], (2, 2)), rtol=0, atol=1e-12)


def test_cpg_gradient_reaches_frequency_and_phase():
    c, _ = _cpg()
    s = _state(np.zeros((4, 3)), np.zeros((4, 3)))
    c.mean(s, np.array([0.1, 0.2, 0.3, 0.4])).sum().backward()
    assert c.p["frequency"].grad.abs() > 0
    assert torch.all(c.p["phase"].grad.abs() > 0)


def test_log_std_bounds_and_default():
    decl = log_std_decl(TINY)
    # half-ranges 1 and 2.5: [-5, 1] for the first, widened by log 2.5 upward for the second.
    np.testing.assert_allclose(decl.low, [-5.0, -5.0])
    np.testing.assert_allclose(decl.high, [1.0, 1.0 + math.log(2.5)])
    np.testing.assert_allclose(np.exp(decl.default), [0.1, 0.25])
    c = build_controller("joint_pd", TINY, parameters={"setpoint": [0, 0], "kp": [1, 1]})
    np.testing.assert_allclose(torch.exp(c.log_std).detach().numpy(), [0.1, 0.25])
    c2 = build_controller("joint_pd", TINY, parameters={"setpoint": [0, 0], "kp": [1, 1]}, exploration_std=[0.2, 0.4])
    np.testing.assert_allclose(torch.exp(c2.log_std).detach().numpy(), [0.2, 0.4], rtol=1e-15)


def test_declarations_depend_on_options_and_context():
    decls = {d.name: d for d in kind_class("linear").declare(TINY, {"inputs": ["qpos", "torso_height"]})}
    assert decls["gain"].shape == (2, 4)
    assert list(decls)[-1] == "log_std"
    mlp = {d.name: d.shape for d in kind_class("mlp").declare(TINY, {"hidden": []})}
    assert mlp["w0"] == (2, 6) and "w1" not in mlp


def test_options_are_resolved_and_read_only():
    c = build_controller("mlp", TINY, settings={"hidden": [3]})
    assert dict(c.settings) == {"inputs": ("qpos", "qvel"), "hidden": (3,), "activation": "tanh", "init_seed": 0, "init": "orthogonal"}
    with pytest.raises(TypeError):
        c.settings["hidden"] = (4,)  # type: ignore[index]


def test_describe_lists_every_parameter():
    c = build_controller("joint_pd", TINY, parameters={"setpoint": [0, 0], "kp": [1, 2]})
    rows = {r["name"]: r for r in c.describe()}
    assert list(rows) == ["setpoint", "kp", "kd", "bias", "log_std"]
    assert rows["kp"]["value"] == [1.0, 2.0] and rows["kp"]["unit"] == "ctrl/rad" and rows["kp"]["low"] == [0.0, 0.0]
    assert rows["setpoint"]["low"] == [-1.0, -3.0]  # the actuated joints' ranges (qpos 0 and 2)


def test_bias_bounds_follow_the_actuator_range():
    c = build_controller("joint_pd", TINY, parameters={"setpoint": [0, 0], "kp": [1, 1]})
    low, high = c.parameter_bounds()["bias"]
    assert low.tolist() == [-1.0, -2.0] and high.tolist() == [1.0, 3.0]


def test_explicit_noise_is_scaled_by_std_then_clipped():
    c = build_controller("joint_pd", TINY, parameters={"setpoint": [0, 0], "kp": [1, 1]}, exploration_std=[0.5, 0.5])
    s = _state(np.zeros((2, 3)), np.zeros((2, 3)))
    a = c.act(s, np.zeros(2), noise=np.array([[1.0, -1.0], [10.0, -10.0]]))
    np.testing.assert_allclose(a, [[0.5, -0.5], [1.0, -2.0]], rtol=0, atol=1e-15)
