"""Register kinetome's own robots as gymnasium envs (``gymnasium.make("kinetome/BenchArm-v0")``).

Each env is a ``RigEnv`` over the rig its builder makes; kwargs ``variant`` (a
YAML path, a mapping or a TaskVariant) and ``render_mode`` go through
``gymnasium.make``, which records them in ``env.spec.kwargs``; the rig records
the resolved variant (name and digest) in ``rig.variant``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Callable, Mapping

import gymnasium

from . import bench_arm, test_walker
from .rig import Rig
from .rig_env import RigEnv
from .variants import TaskVariant

__all__ = ["OWN_ENVS", "make_env", "register_envs"]

# env id -> (rig builder, max episode steps)
OWN_ENVS: dict[str, tuple[Callable[..., Rig], int]] = {
    bench_arm.ENV_ID: (bench_arm.build_bench_arm, bench_arm.MAX_EPISODE_STEPS),
    test_walker.WALK_ID: (test_walker.build_test_walker, test_walker.MAX_EPISODE_STEPS),
    test_walker.STAND_ID: (test_walker.build_test_walker_stand, test_walker.MAX_EPISODE_STEPS),
}


def make_env(
    *,
    env_id: str,
    variant: TaskVariant | Mapping[str, Any] | str | Path | None = None,
    render_mode: str | None = None,
    width: int = 320,
    height: int = 240,
) -> RigEnv:
    """The gymnasium entry point: build the rig for ``env_id`` with ``variant``, wrap it in RigEnv."""
    try:
        builder, _ = OWN_ENVS[env_id]
    except KeyError:
        raise KeyError(f"unknown kinetome env {env_id!r}; known: {', '.join(OWN_ENVS)}") from None
    return RigEnv(builder(variant=variant), render_mode=render_mode, width=width, height=height)


def register_envs() -> None:
    """Register every own env with gymnasium (idempotent)."""
    for env_id, (_, max_steps) in OWN_ENVS.items():
        if env_id in gymnasium.registry:
            continue
        gymnasium.register(
            id=env_id,
            entry_point="kinetome.envs.gym_registration:make_env",
            kwargs={"env_id": env_id, "variant": None},
            max_episode_steps=max_steps,
        )


register_envs()
