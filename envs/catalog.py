"""Import every module that registers a rig, so make_rig knows all envs."""

from .adapters import gym_mujoco  # noqa: F401
from . import bench_arm, test_walker  # noqa: F401

__all__: list[str] = []
