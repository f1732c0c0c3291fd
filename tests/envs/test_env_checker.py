"""gymnasium's env checker on every own env and every shipped variant that applies to it."""

from __future__ import annotations

import warnings
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env

import kinetome.envs  # noqa: F401  (registers the envs)
from kinetome.envs.errors import EnvConfigError
from kinetome.envs.variants import load_variant

ROOT = Path(__file__).resolve().parents[2]
VARIANTS = ROOT / "configs" / "variants"
ARM, WALK, STAND = "kinetome/BenchArm-v0", "kinetome/TestWalker-v0", "kinetome/TestWalkerStand-v0"
OWN = (ARM, WALK, STAND)

# Which shipped variant applies to which env (the others must refuse it).
APPLIES = {
    "heavy_payload": {ARM},
    "moved_tray": {ARM},
    "low_friction": {WALK, STAND},
    "slope": {WALK, STAND},
    "fast_walk": {WALK},
    "weak_motors": {ARM, WALK, STAND},
    "moon_gravity": {ARM, WALK, STAND},
}


def test_the_table_covers_every_shipped_variant():
    assert set(APPLIES) == {p.stem for p in VARIANTS.glob("*.yaml")}


# The warnings check_env gives on our envs, each deliberate (gymnasium 1.4's texts):
# observations are unbounded (velocities, contact forces), and actions are joint
# torques in N m, not a normalised [-1, 1] range. Any other warning fails the test.
EXPECTED_WARNINGS = (
    "A Box observation space maximum value is infinity",
    "A Box observation space minimum value is -infinity",
    "For Box action spaces, we recommend using a symmetric and normalized space",
)


def _check(env_id, **kwargs):
    env = gym.make(env_id, **kwargs)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        check_env(env.unwrapped, skip_render_check=kwargs.get("render_mode") is None)
    assert_expected_warnings([str(w.message) for w in caught])
    return env


def assert_expected_warnings(messages: list[str], expected: tuple[str, ...] = EXPECTED_WARNINGS) -> None:
    """Every expected warning was given, and nothing else."""
    unexpected = [m for m in messages if not any(e in m for e in expected)]
    missing = [e for e in expected if not any(e in m for m in messages)]
    assert unexpected == [] and missing == [], (unexpected, missing)


def test_the_warning_check_can_fail():
    assert_expected_warnings([f"WARN: {e}." for e in EXPECTED_WARNINGS])
    with pytest.raises(AssertionError):
        assert_expected_warnings([f"WARN: {e}." for e in EXPECTED_WARNINGS] + ["WARN: obs is not within the observation space"])
    with pytest.raises(AssertionError):
        assert_expected_warnings([f"WARN: {e}." for e in EXPECTED_WARNINGS[:2]])


@pytest.mark.parametrize("env_id", OWN)
def test_check_env_nominal_with_rendering(env_id):
    env = _check(env_id, render_mode="rgb_array", width=64, height=48)
    assert env.spec.max_episode_steps == env.unwrapped.rig.max_episode_steps
    assert env.spec.kwargs["variant"] is None
    assert env.unwrapped.rig.variant.name == "nominal"
    env.close()


CASES = [(env_id, name) for name, ids in sorted(APPLIES.items()) for env_id in OWN if env_id in ids]


@pytest.mark.parametrize("env_id,name", CASES, ids=[f"{e.split('/')[1]}-{n}" for e, n in CASES])
def test_check_env_with_each_applicable_variant(env_id, name):
    path = VARIANTS / f"{name}.yaml"
    env = _check(env_id, variant=str(path))
    assert env.spec.kwargs["variant"] == str(path)  # recorded as given
    rig = env.unwrapped.rig
    assert (rig.variant.name, rig.variant.digest) == (name, load_variant(path).digest)


REFUSED = [(env_id, name) for name, ids in sorted(APPLIES.items()) for env_id in OWN if env_id not in ids]


@pytest.mark.parametrize("env_id,name", REFUSED, ids=[f"{e.split('/')[1]}-{n}" for e, n in REFUSED])
def test_variants_for_another_robot_are_refused(env_id, name):
    with pytest.raises(EnvConfigError, match=rf"{name}.yaml: \w+: does not apply to robot"):
        gym.make(env_id, variant=str(VARIANTS / f"{name}.yaml"))


def test_variant_as_dict_and_time_limit():
    env = gym.make(ARM, variant={"name": "light", "payload_mass": 0.05})
    assert env.unwrapped.rig.variant.payload_mass == 0.05
    assert env.spec.kwargs["variant"] == {"name": "light", "payload_mass": 0.05}
    env.reset(seed=0)
    steps, truncated = 0, False
    while not truncated:
        _, _, terminated, truncated, _ = env.step(np.zeros(3, dtype=np.float32))
        assert not terminated
        steps += 1
    assert steps == 250


def test_actions_are_clipped_to_the_motor_range():
    env = gym.make(ARM).unwrapped
    env.reset(seed=0)
    _, _, _, _, info = env.step(np.array([100.0, -100.0, 5.0]))
    np.testing.assert_array_equal(info["named_state"]["torque"][0], [8.0, -6.0, 2.0])
