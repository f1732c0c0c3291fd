"""Error paths: every validator fires with the pinned message (what, where, actual value, fix)."""

from __future__ import annotations

import numpy as np
import pytest
import safetensors.numpy

from kinetome.library.controllers import (
    ControllerContext,
    ControllerError,
    build_controller,
    kind_class,
    load_parameters,
    save_parameters,
)
from kinetome.library.errors import InvalidInputError

from .examples import EXAMPLES, TINY, TINY_LAYOUT, tiny_states

PD = {"setpoint": [0.0, 0.0], "kp": [1.0, 1.0]}
TASK = {"setpoint": [0.0, 0.0, 0.1], "kp": [1.0, 1.0, 1.0]}

# (kind, parameters, bounds, settings, exploration_std, exact message)
BUILD_ERRORS = [
    ("joint_pd", {**PD, "kp": [1.0, 2.0, 3.0]}, None, None, None,
     "controller.parameters.kp must have shape (2,), got (3,); give one value per actuator"),
    ("joint_pd", {**PD, "kp": [-1.0, 2.0]}, None, None, None,
     "controller.parameters.kp must lie within its bounds [0, 1000], got -1 at element 0; "
     "give a value inside the bounds or widen controller.bounds.kp"),
    ("joint_pd", {**PD, "kp": [1.0, 50.0]}, {"kp": (0.0, 10.0)}, None, None,
     "controller.parameters.kp must lie within its bounds [0, 10], got 50 at element 1; "
     "give a value inside the bounds or widen controller.bounds.kp"),
    ("joint_pd", {**PD, "setpoint": [float("nan"), 0.0]}, None, None, None,
     "controller.parameters.setpoint must be finite, got nan at element 0; give finite numbers"),
    ("joint_pd", {**PD, "setpoint": ["left", 0.0]}, None, None, None,
     "controller.parameters.setpoint value must be numbers, got ['left', 0.0]; give a number or a (nested) list of numbers"),
    ("joint_pd", {"setpoint": [0.0, 0.0]}, None, None, None,
     "controller.parameters.kp is required for kind 'joint_pd'; give one value per actuator"),
    ("joint_pd", {**PD, "kpp": [1.0, 1.0]}, None, None, None,
     "controller.parameters.kpp is not a parameter of kind 'joint_pd'; did you mean 'kp'? "
     "known parameters: bias, kd, kp, log_std, setpoint"),
    ("joint_pd", PD, {"kp": (-1.0, 10.0)}, None, None,
     "controller.bounds.kp must lie within the kind's limits [0, inf], got low -1 at element 0; keep low >= 0"),
    ("joint_pd", PD, {"kp": (5.0, 1.0)}, None, None,
     "controller.bounds.kp must have low < high, got low 5 >= high 1 at element 0; swap them or widen the range"),
    ("joint_pd", PD, {"kp": ([0.0, 0.0, 0.0], 10.0)}, None, None,
     "controller.bounds.kp low must be a number or have shape (2,), got shape (3,); "
     "give one bound for every element or one per element"),
    ("joint_pd", PD, {"kp": (0.0, float("inf"))}, None, None,
     "controller.bounds.kp high must be finite, got inf at element 0; give finite bounds"),
    ("joint_pd", PD, {"kp": 5.0}, None, None,
     "controller.bounds.kp must be a (low, high) pair, got 5.0; give low and high, each a number or one per element"),
    ("joint_pd", PD, {"kd": (1.0, 5.0)}, None, None,
     "controller.parameters.kd has default 0 at element 0 outside its bounds [1, 5]; give a value inside the bounds"),
    ("joint_pd", PD, {"kdd": (0.0, 1.0)}, None, None,
     "controller.bounds.kdd is not a bounded parameter of kind 'joint_pd'; did you mean 'kd'? "
     "known parameters: bias, kd, kp, log_std, setpoint"),
    ("joint_dp", PD, None, None, None,
     "controller.kind must name a known controller kind, got 'joint_dp'; did you mean 'joint_pd'? "
     "known kinds: cpg, joint_pd, linear, mlp, task_pd"),
    ("joint_pd", PD, None, {"site": "fingertip"}, None,
     "controller.settings.site is not a setting of kind 'joint_pd'; known settings: none"),
    ("task_pd", TASK, None, {"sitee": "fingertip"}, None,
     "controller.settings.sitee is not a setting of kind 'task_pd'; did you mean 'site'? known settings: site"),
    ("task_pd", TASK, None, {"site": "fingertipp"}, None,
     "controller.settings.site must name a 3-vector quantity of the state, got 'fingertipp'; "
     "did you mean 'fingertip'? quantities with a velocity: fingertip"),
    ("task_pd", TASK, None, {"site": "qpos"}, None,
     "controller.settings.site needs the velocity quantity 'qpos_vel', which the state does not have; "
     "quantities with a velocity: fingertip\n"
     "controller.settings.site needs the Jacobian 'qpos_jac', which the env cannot supply; Jacobians available: fingertip"),
    ("task_pd", {**TASK, "kp": [1.0, 1.0]}, None, None, None,
     "controller.parameters.kp must have shape (3,), got (2,); give three values, one per world axis (x, y, z)"),
    ("task_pd", {**TASK, "setpoint": [0.0, 0.0, 1.0]}, None, None, None,
     "controller.parameters.setpoint must lie within its bounds [-0.1, 0.4], got 1 at element 2; "
     "give a value inside the bounds or widen controller.bounds.setpoint"),
    ("linear", {}, None, {"inputs": ["qposs"]}, None,
     "controller.settings.inputs must name quantities of the state, got 'qposs'; did you mean 'qpos'? "
     "known: qpos, qvel, fingertip, fingertip_vel, torso_height"),
    ("linear", {}, None, {"inputs": ["qpos", "qpos"]}, None,
     "controller.settings.inputs must not repeat a quantity, got 'qpos' twice; list each quantity once"),
    ("linear", {}, None, {"inputs": "qpos"}, None,
     "controller.settings.inputs must be a non-empty list of named-state quantities, got 'qpos'; "
     "e.g. [qpos, qvel]; known: qpos, qvel, fingertip, fingertip_vel, torso_height"),
    ("linear", {"gain": np.zeros((2, 3))}, None, {"inputs": ["qpos", "qvel"]}, None,
     "controller.parameters.gain must have shape (2, 6), got (2, 3); "
     "give one row per actuator (2) with one column per input value (6)"),
    ("mlp", {}, None, {"hidden": [64, 0]}, None,
     "controller.settings.hidden must be a list of layer widths in [1, 4096], got [64, 0]; "
     "e.g. [64, 64]; [] gives a single tanh layer"),
    ("mlp", {}, None, {"activation": "sigmoid"}, None,
     "controller.settings.activation must be one of tanh, relu, got 'sigmoid'; use tanh (the default) or relu"),
    ("mlp", {}, None, {"init_seed": -3}, None,
     "controller.settings.init_seed must be a non-negative integer, got -3; e.g. 0"),
    ("mlp", {"input_std": [0.0] * 6}, None, None, None,
     "controller.parameters.input_std must lie within its bounds [1e-09, 1e+09], got 0 at element 0; "
     "give a value inside the bounds or widen controller.bounds.input_std"),
    ("cpg", {"kp": [1.0, 1.0], "frequency": [1.0]}, None, None, None,
     "controller.parameters.frequency must have shape (), got (1,); give one number"),
    ("cpg", {"kp": [1.0, 1.0]}, {"amplitude": (-0.5, 1.0)}, None, None,
     "controller.bounds.amplitude must lie within the kind's limits [0, inf], got low -0.5 at element 0; keep low >= 0"),
    ("joint_pd", PD, None, None, 0.0,
     "controller.exploration_std must be positive and finite, got 0 at element 0; give e.g. 0.1"),
    ("joint_pd", PD, None, None, [0.1, 0.1, 0.1],
     "controller.exploration_std must be a number or have shape (2,), got shape (3,); "
     "give one std for all actuators or one per actuator"),
    ("joint_pd", PD, None, None, 10.0,
     "controller.exploration_std must lie within [0.00673795, 2.71828] (exp of the log_std bounds), got 10 at element 0; "
     "give a std inside that range or widen controller.bounds.log_std"),
    ("joint_pd", {**PD, "log_std": [-1.0, -1.0]}, None, None, 0.1,
     "controller.exploration_std conflicts with the given log_std parameter; give exploration_std or parameters.log_std, not both"),
]


@pytest.mark.parametrize(
    "kind, parameters, bounds, settings, std, message", BUILD_ERRORS, ids=[m.split(";")[0][11:60] for *_, m in BUILD_ERRORS]
)
def test_build_errors_are_pinned(kind, parameters, bounds, settings, std, message):
    with pytest.raises(ControllerError) as info:
        build_controller(kind, TINY, parameters=parameters, bounds=bounds, settings=settings, exploration_std=std)
    assert str(info.value) == message
    assert info.value.lines() == message.split("\n")
    assert info.value.problems[0].field == message.split(" ", 1)[0]


def test_controller_error_is_an_invalid_input_and_a_value_error():
    with pytest.raises(ControllerError) as info:
        build_controller("joint_pd", TINY, parameters={"setpoint": [0.0, 0.0]})
    assert isinstance(info.value, InvalidInputError)
    assert isinstance(info.value, ValueError)
    assert info.value.exit_code == 2


def test_every_problem_is_reported_at_once():
    with pytest.raises(ControllerError) as info:
        build_controller("joint_pd", TINY, parameters={"kp": [1.0], "kpp": 1.0}, bounds={"kd": (5.0, 1.0)})
    fields = [p.field for p in info.value.problems]
    assert fields == [
        "controller.parameters.kpp",
        "controller.parameters.setpoint",
        "controller.parameters.kp",
        "controller.bounds.kd",
    ]
    assert len(str(info.value).splitlines()) == 4


def test_where_prefixes_every_field():
    with pytest.raises(ControllerError) as info:
        build_controller("joint_pd", TINY, parameters={"setpoint": [0.0, 0.0], "kp": [1.0]}, where="chain.steps.0.controller")
    assert str(info.value).startswith("chain.steps.0.controller.parameters.kp must have shape (2,), got (1,)")


def test_kind_class_unknown_kind():
    with pytest.raises(ControllerError, match=r"controller.kind must name a known controller kind, got 'mpl'; did you mean 'mlp'\?"):
        kind_class("mpl")


def test_task_pd_refuses_a_site_without_a_jacobian():
    import dataclasses

    ctx = dataclasses.replace(TINY, jacobians=())
    with pytest.raises(ControllerError) as info:
        build_controller("task_pd", ctx, parameters=TASK)
    assert str(info.value) == (
        "controller.settings.site needs the Jacobian 'fingertip_jac', which the env cannot supply; Jacobians available: none"
    )


# ----- load_values and load_parameters ---------------------------------------

def _pd():
    return build_controller("joint_pd", TINY, parameters=PD)


def test_load_values_rejects_unknown_missing_and_wrong_shapes_at_once():
    c = _pd()
    values = c.parameter_values()
    before = c.parameter_values()
    values.pop("bias")
    values["kp"] = np.ones(3)
    values["gain"] = np.ones(2)
    with pytest.raises(ControllerError) as info:
        c.load_values(values)
    assert info.value.lines() == [
        "controller.parameters.gain is not a parameter of kind 'joint_pd'; known parameters: bias, kd, kp, log_std, setpoint",
        "controller.parameters.bias is missing from the loaded values; give every parameter of kind 'joint_pd': setpoint, kp, kd, bias, log_std",
        "controller.parameters.kp must have shape (2,), got (3,); give one value per actuator",
    ]
    after = c.parameter_values()
    assert all(before[k].tobytes() == after[k].tobytes() for k in before), "a rejected load must change nothing"


def test_load_values_rejects_out_of_bound_values():
    c = _pd()
    values = c.parameter_values()
    values["kd"] = np.array([0.0, -2.0])
    with pytest.raises(ControllerError, match=r"controller.parameters.kd must lie within its bounds \[0, 100\], got -2 at element 1"):
        c.load_values(values)


def test_load_values_partial_updates_only_the_given_names():
    c = build_controller("mlp", TINY)
    c.load_values({"input_mean": np.full(6, 0.5)}, partial=True)
    assert np.array_equal(c.parameter_values()["input_mean"], np.full(6, 0.5))
    assert np.array_equal(c.parameter_values()["input_std"], np.ones(6))


@pytest.mark.parametrize(
    "data, message",
    [
        (b"abc", "controller.parameters must be safetensors data, got 3 bytes; re-save with save_parameters"),
        (b"\xff" * 16, "controller.parameters must be safetensors data, got a header of 18446744073709551615 bytes in 16 bytes; "
         "the file is truncated or not safetensors; re-save with save_parameters"),
        ("not bytes", "controller.parameters must be bytes of safetensors data, got str; read the file in binary mode"),
    ],
)
def test_load_parameters_rejects_bad_data(data, message):
    with pytest.raises(ControllerError) as info:
        load_parameters(data)
    assert str(info.value) == message


def test_load_parameters_rejects_truncated_file():
    data = save_parameters(_pd())
    with pytest.raises(ControllerError, match="controller.parameters must be safetensors data"):
        load_parameters(data[:-5])


def test_load_parameters_rejects_integer_tensors_and_wrong_kind():
    data = safetensors.numpy.save({"kp": np.array([1, 2], dtype=np.int64)})
    with pytest.raises(ControllerError, match=r"controller.parameters.kp must be floating point, got dtype int64; store parameters as float64"):
        load_parameters(data)
    with pytest.raises(ControllerError) as info:
        load_parameters(save_parameters(_pd()), kind="cpg")
    assert str(info.value) == (
        "controller.parameters must hold parameters of kind 'cpg', got kind 'joint_pd'; load the file saved for this controller"
    )


# ----- runtime input errors ---------------------------------------------------

def test_missing_state_names_are_named():
    c = EXAMPLES[1].build()  # task_pd needs the Jacobian
    states = tiny_states(4, seed=0)
    del states["fingertip_jac"]
    with pytest.raises(ValueError, match=r"state must hold 'fingertip_jac' for controller kind 'task_pd'"):
        c.act(states, np.zeros(4))


def test_wrong_state_and_time_shapes_are_named():
    c = _pd()
    states = tiny_states(4, seed=0)
    bad = {**states, "qvel": states["qvel"][:, :2]}
    with pytest.raises(ValueError, match=r"state\['qvel'\] must have shape \(batch, 3\) = \(4, 3\), got \(4, 2\)"):
        c.act(bad, np.zeros(4))
    with pytest.raises(ValueError, match=r"skill_time must have shape \(4,\) like the state batch, got \(3,\)"):
        c.act(states, np.zeros(3))
    with pytest.raises(ValueError, match=r"noise must have shape \(4, 2\), got \(4, 3\)"):
        c.act(states, np.zeros(4), noise=np.zeros((4, 3)))


# ----- context ----------------------------------------------------------------

@pytest.mark.parametrize(
    "change, message",
    [
        ({"action_high": np.array([1.0, -2.0])},
         "context action limits must have low < high, got [-2, -2] for actuator 1; declare ctrlrange (ctrllimited) for every actuator"),
        ({"action_high": np.array([1.0])}, "context action_high must have 2 entries like action_low, got 1"),
        ({"actuated_qpos": (0, 3)}, "context actuated_qpos indices must lie in [0, 3), got 3"),
        ({"actuated_qvel": (0,)}, "context actuated_qvel must have one index per actuator (2), got 1"),
        ({"dt": 0.0}, "context dt must be a positive number of seconds, got 0.0"),
        ({"nv": 0}, "context nv must be a positive int, got 0"),
    ],
)
def test_context_validation(change, message):
    fields = dict(layout=TINY_LAYOUT, action_low=TINY.action_low, action_high=TINY.action_high,
                  actuated_qpos=TINY.actuated_qpos, actuated_qvel=TINY.actuated_qvel, nv=3, dt=0.02)
    fields.update(change)
    with pytest.raises(ValueError) as info:
        ControllerContext(**fields)
    assert str(info.value) == message
