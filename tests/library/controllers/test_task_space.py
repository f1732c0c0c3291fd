"""Task-space PD on a real MuJoCo arm: the Jacobian it relies on, and that it reaches its target."""

from __future__ import annotations

import mujoco
import mujoco.batch
import numpy as np
import pytest

from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.envs.rig import Rig, Source, read_state
from kinetome.library.controllers import build_controller, check_controller, context_from_rig

# A planar 3-link arm in the x-y plane (hinges about z), torque motors, no contacts.
ARM_XML = """
<mujoco model="planar_arm3">
  <option timestep="0.002"/>
  <default><geom contype="0" conaffinity="0"/><joint armature="0.005" damping="0.01"/><motor ctrllimited="true" ctrlrange="-2 2"/></default>
  <worldbody>
    <body name="link1">
      <joint name="j1" type="hinge" axis="0 0 1"/>
      <geom type="capsule" fromto="0 0 0 0.1 0 0" size="0.01" mass="1"/>
      <body name="link2" pos="0.1 0 0">
        <joint name="j2" type="hinge" axis="0 0 1"/>
        <geom type="capsule" fromto="0 0 0 0.1 0 0" size="0.01" mass="1"/>
        <body name="link3" pos="0.1 0 0">
          <joint name="j3" type="hinge" axis="0 0 1"/>
          <geom type="capsule" fromto="0 0 0 0.08 0 0" size="0.01" mass="0.5"/>
          <site name="fingertip" pos="0.08 0 0"/>
        </body>
      </body>
    </body>
  </worldbody>
  <actuator>
    <motor joint="j1"/>
    <motor joint="j2"/>
    <motor joint="j3"/>
  </actuator>
  <sensor>
    <framepos name="fingertip" objtype="site" objname="fingertip"/>
    <framelinvel name="fingertip_vel" objtype="site" objname="fingertip"/>
  </sensor>
</mujoco>
"""
LINKS = np.array([0.1, 0.1, 0.08])
FRAME_SKIP = 5


@pytest.fixture(scope="module")
def rig() -> Rig:
    model = mujoco.MjModel.from_xml_string(ARM_XML)
    pi = float(np.pi)
    layout = StateLayout((
        Quantity("qpos", (3,), "rad", "joint angles", low=(-pi,) * 3, high=(pi,) * 3),
        Quantity("qvel", (3,), "rad/s", "joint velocities"),
        Quantity("fingertip", (3,), "m", "fingertip position", low=(-0.3, -0.3, -0.01), high=(0.3, 0.3, 0.01), derived=True),
        Quantity("fingertip_vel", (3,), "m/s", "fingertip velocity", derived=True),
    ))
    zeros = lambda s: np.zeros(len(s["qpos"]))  # noqa: E731 - the task terms do not matter here
    return Rig(
        env_id="test/planar_arm3",
        model=model,
        frame_skip=FRAME_SKIP,
        layout=layout,
        sources={
            "qpos": Source("qpos", (0, 1, 2)),
            "qvel": Source("qvel", (0, 1, 2)),
            "fingertip": Source("sensordata", (0, 1, 2)),
            "fingertip_vel": Source("sensordata", (3, 4, 5)),
        },
        reward=lambda before, action, after: (zeros(after), {}),
        terminated=lambda s: np.zeros(len(s["qpos"]), dtype=bool),
        observe=lambda s: np.concatenate([s["qpos"], s["qvel"]], axis=1),
        start=lambda model, rng, n: (rng.uniform(-1, 1, (n, 3)), np.zeros((n, 3))),
        jacobian_sites={"fingertip": mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_SITE, "fingertip")},
        actuated_qpos=(0, 1, 2),
        actuated_qvel=(0, 1, 2),
    )


def _site_jac(model, data, site) -> np.ndarray:
    jacp = np.zeros((3, model.nv))
    mujoco.mj_jacSite(model, data, jacp, None, site)
    return jacp


def _state(rig: Rig, data) -> dict[str, np.ndarray]:
    s = read_state(rig, qpos=data.qpos.copy(), qvel=data.qvel.copy(), sensordata=data.sensordata.copy())
    s["fingertip_jac"] = _site_jac(rig.model, data, rig.jacobian_sites["fingertip"])[None]
    return s


def test_context_from_rig(rig):
    ctx = context_from_rig(rig)
    assert ctx.n_act == 3 and ctx.nv == 3
    assert ctx.dt == pytest.approx(0.002 * FRAME_SKIP)
    assert ctx.action_low.tolist() == [-2.0] * 3 and ctx.action_high.tolist() == [2.0] * 3
    assert ctx.actuated_qvel == (0, 1, 2) and ctx.jacobians == ("fingertip",)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mj_jac_site_equals_finite_differences_and_planar_formula(rig, seed):
    model, site = rig.model, rig.jacobian_sites["fingertip"]
    data = mujoco.MjData(model)
    q0 = np.random.default_rng(seed).uniform(-np.pi, np.pi, 3)
    data.qpos[:] = q0
    mujoco.mj_forward(model, data)
    jac = _site_jac(model, data, site)

    # Reference: central finite differences of the site position w.r.t. qpos
    # (hinge joints, so qpos and qvel share coordinates). Step h = 1e-6:
    # truncation O(h^2) ~ 1e-13, rounding ~ eps * |x| / h ~ 1e-10, so a 1e-6
    # tolerance is loose yet far below any real Jacobian error.
    h = 1e-6
    fd = np.zeros((3, model.nv))
    for j in range(model.nv):
        for sign in (1.0, -1.0):
            data.qpos[:] = q0
            data.qpos[j] += sign * h
            mujoco.mj_kinematics(model, data)
            fd[:, j] += sign * data.site_xpos[site] / (2 * h)
    np.testing.assert_allclose(jac, fd, rtol=0, atol=1e-6)

    # Reference: planar serial-arm Jacobian, with theta_k = q1 + ... + qk,
    # dx/dq_j = -sum_{k>=j} l_k sin theta_k, dy/dq_j = sum_{k>=j} l_k cos theta_k
    # (any robotics textbook, e.g., from memory, Siciliano et al., Robotics: Modelling,
    # Planning and Control, ch. 3).
    theta = np.cumsum(q0)
    analytic = np.zeros((3, 3))
    for j in range(3):
        analytic[0, j] = -np.sum(LINKS[j:] * np.sin(theta[j:]))
        analytic[1, j] = np.sum(LINKS[j:] * np.cos(theta[j:]))
    np.testing.assert_allclose(jac, analytic, rtol=0, atol=1e-12)


def test_batched_jacobian_equals_mj_jac_site(rig):
    # The runtime computes <site>_jac with mujoco.batch.Batch.jac; it must match mj_jacSite.
    model, site = rig.model, rig.jacobian_sites["fingertip"]
    qpos = np.random.default_rng(3).uniform(-np.pi, np.pi, (4, 3))
    batch = mujoco.batch.Batch(model, 4, 1)
    batch.bind("qpos")[:] = qpos
    site_xpos = batch.bind("site_xpos")
    batch.forward()
    jacp, _ = batch.jac(int(model.site_bodyid[site]), site_xpos[:, site])
    data = mujoco.MjData(model)
    for i in range(4):
        data.qpos[:] = qpos[i]
        mujoco.mj_forward(model, data)
        np.testing.assert_allclose(jacp[i], _site_jac(model, data, site), rtol=0, atol=1e-12)


TARGET = np.array([0.15, 0.12, 0.0])


def _controller(rig, **override):
    p = {"setpoint": TARGET, "kp": [50.0, 50.0, 50.0], "kd": [10.0, 10.0, 10.0], "joint_damping": [0.02] * 3}
    p.update(override)
    return build_controller("task_pd", context_from_rig(rig), parameters=p, exploration_std=0.05)


def _start(rig, qpos, qvel=(0.0, 0.0, 0.0)):
    data = mujoco.MjData(rig.model)
    data.qpos[:] = qpos
    data.qvel[:] = qvel
    mujoco.mj_forward(rig.model, data)
    return data


def _step(rig, data, action):
    data.ctrl[:] = np.clip(action, rig.action_low, rig.action_high)
    for _ in range(FRAME_SKIP):
        mujoco.mj_step(rig.model, data)
    mujoco.mj_forward(rig.model, data)


def test_commanded_force_points_at_the_target(rig):
    c = _controller(rig, joint_damping=[0.0] * 3)
    data = _start(rig, [0.3, 0.5, -0.4], [0.2, -0.1, 0.3])
    s = _state(rig, data)
    error = TARGET - s["fingertip"][0]
    force = 50.0 * error - 10.0 * s["fingertip_vel"][0]
    assert float(force @ error) > 0  # the virtual spring pulls toward the target
    u = c.mean(s, np.zeros(1)).detach().numpy()[0]
    jac = s["fingertip_jac"][0]
    np.testing.assert_allclose(u, jac.T @ force, rtol=0, atol=1e-13)
    # The joint effort does positive work along the error direction: u . (J^T e) = f^T J J^T e > 0.
    assert float(u @ (jac.T @ error)) > 0


def test_task_pd_reduces_the_task_error_in_simulation(rig):
    c = _controller(rig)
    data = _start(rig, [0.3, 0.5, -0.4])
    s = _state(rig, data)
    first = np.linalg.norm(TARGET - s["fingertip"][0])
    assert np.all(np.abs(c.mean(s, np.zeros(1)).detach().numpy()) < rig.action_high), "test gains must not saturate"
    _step(rig, data, c.act(s, np.zeros(1))[0])
    after_one = np.linalg.norm(TARGET - _state(rig, data)["fingertip"][0])
    assert after_one < first  # one small step (10 ms) already closes the gap
    errors = [after_one]
    for k in range(1, 300):  # 3 s
        s = _state(rig, data)
        _step(rig, data, c.act(s, np.full(1, k * rig.dt))[0])
        errors.append(np.linalg.norm(TARGET - _state(rig, data)["fingertip"][0]))
    assert errors[-1] < 1e-3, f"fingertip should settle within 1 mm of the target, ended {errors[-1]:.5f} m away"
    assert errors[-1] < 0.05 * first
    assert max(errors[150:]) < 0.01  # settled, not passing by


def test_task_pd_passes_the_contract_checker_on_real_states(rig):
    c = _controller(rig)
    rows = []
    for q in np.random.default_rng(4).uniform(-1, 1, (6, 3)):
        rows.append(_state(rig, _start(rig, q, [0.1, -0.2, 0.3])))
    states = {k: np.concatenate([r[k] for r in rows]) for k in rows[0]}
    assert check_controller(c, states=states, seed=5) == []
