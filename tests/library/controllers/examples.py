"""One example controller per kind on a tiny context; every generic test iterates EXAMPLES."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.library.controllers import Controller, ControllerContext, build_controller

__all__ = ["TINY", "TINY_LAYOUT", "ControllerExample", "EXAMPLES", "example_ids", "tiny_states", "extreme_states"]

# Three joints, two actuated (joints 0 and 2), an asymmetric action range so
# the mid-point is not zero, and one scalar quantity to test flattening.
TINY_LAYOUT = StateLayout((
    Quantity("qpos", (3,), "rad", "joint positions", low=(-1.0, -2.0, -3.0), high=(1.0, 2.0, 3.0)),
    Quantity("qvel", (3,), "rad/s", "joint velocities"),
    Quantity("fingertip", (3,), "m", "fingertip position", low=(-0.5, -0.5, -0.1), high=(0.5, 0.5, 0.4), derived=True),
    Quantity("fingertip_vel", (3,), "m/s", "fingertip velocity", derived=True),
    Quantity("torso_height", (), "m", "height of the torso"),
))
TINY = ControllerContext(
    layout=TINY_LAYOUT,
    action_low=np.array([-1.0, -2.0]),
    action_high=np.array([1.0, 3.0]),
    actuated_qpos=(0, 2),
    actuated_qvel=(0, 2),
    nv=3,
    dt=0.02,
    jacobians=("fingertip",),
)


@dataclass(frozen=True)
class ControllerExample:
    """A named way to build one controller; ``build()`` returns a fresh one each call."""

    name: str
    kind: str
    parameters: dict[str, Any] = field(default_factory=dict)
    settings: dict[str, Any] = field(default_factory=dict)
    bounds: dict[str, Any] = field(default_factory=dict)
    exploration_std: Any = 0.2

    def build(self, context: ControllerContext = TINY) -> Controller:
        return build_controller(
            self.kind,
            context,
            parameters=self.parameters,
            bounds=self.bounds,
            settings=self.settings,
            exploration_std=self.exploration_std,
        )


_rng = np.random.default_rng(20240601)

EXAMPLES: tuple[ControllerExample, ...] = (
    ControllerExample("joint_pd", "joint_pd", {"setpoint": [0.3, -0.2], "kp": [5.0, 3.0], "kd": [0.5, 0.2], "bias": [0.1, -0.1]}),
    ControllerExample(
        "task_pd",
        "task_pd",
        {"setpoint": [0.1, 0.2, 0.05], "kp": [10.0, 10.0, 5.0], "kd": [1.0, 1.0, 0.5], "joint_damping": [0.1, 0.2]},
        settings={"site": "fingertip"},
        bounds={"kp": (0.0, 50.0)},
    ),
    ControllerExample(
        "linear",
        "linear",
        {"gain": _rng.normal(size=(2, 7)).round(3).tolist(), "reference": [0.1, 0.0, -0.1, 0.0, 0.0, 0.0, 0.5]},
        settings={"inputs": ["qpos", "qvel", "torso_height"]},
        exploration_std=[0.1, 0.3],
    ),
    ControllerExample(
        "mlp",
        "mlp",
        {"input_mean": [0.0, 0.1, 0.0, 0.0, 0.0, 0.1, 1.0], "input_std": [1.0, 2.0, 1.0, 0.3, 0.3, 0.3, 0.5]},
        settings={"inputs": ["qpos", "fingertip", "torso_height"], "hidden": [8, 5], "init_seed": 3},
    ),
    ControllerExample("mlp_relu_shallow", "mlp", settings={"hidden": [6], "activation": "relu", "init_seed": 1}),
    ControllerExample(
        "cpg",
        "cpg",
        {"frequency": 1.5, "amplitude": [0.3, 0.5], "phase": [0.0, math.pi], "offset": [0.1, -0.1], "kp": [4.0, 4.0], "kd": [0.2, 0.2]},
    ),
)


def example_ids() -> list[str]:
    return [e.name for e in EXAMPLES]


def tiny_states(batch: int, seed: int, *, scale: float = 1.0) -> dict[str, np.ndarray]:
    """Random named state (and a fingertip Jacobian) for TINY, ``batch`` rows."""
    rng = np.random.default_rng(seed)
    return {
        "qpos": scale * rng.uniform(-1.0, 1.0, size=(batch, 3)),
        "qvel": scale * rng.normal(size=(batch, 3)),
        "fingertip": scale * rng.uniform(-0.3, 0.3, size=(batch, 3)),
        "fingertip_vel": scale * rng.normal(size=(batch, 3)),
        "torso_height": scale * rng.uniform(0.5, 1.5, size=batch),
        "fingertip_jac": rng.normal(scale=0.2, size=(batch, 3, 3)),
    }


def extreme_states(batch: int, seed: int) -> dict[str, np.ndarray]:
    """States a million times outside any sensible range, both signs."""
    return tiny_states(batch, seed, scale=1.0e6)
