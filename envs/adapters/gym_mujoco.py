"""Rigs for gymnasium's own MuJoCo envs (v5), registered under their gymnasium ids.

``make_rig("Hopper-v5")`` compiles gymnasium's ``hopper.xml`` with named-state
sensors added; ``RigEnv(make_rig("Hopper-v5"))`` then steps bit-identically to
``gymnasium.make("Hopper-v5")`` from the same state. Differences from
gymnasium (named state is current, gymnasium's body positions and contact
forces are one substep stale) are listed in each rig's ``metadata["notes"]``.
"""

from __future__ import annotations

from typing import Any

from ..rig import Rig, register_rig
from .gym_task import build_rig
from .live import layout_of, layout_table, named_state_of
from .robots import TASKS

__all__ = [
    "GYM_ENV_IDS",
    "reacher_rig",
    "pusher_rig",
    "hopper_rig",
    "walker2d_rig",
    "half_cheetah_rig",
    "ant_rig",
    "inverted_pendulum_rig",
    "named_state_of",
    "layout_of",
    "layout_table",
]

GYM_ENV_IDS: tuple[str, ...] = tuple(TASKS)


@register_rig("Reacher-v5")
def reacher_rig(variant: Any = None) -> Rig:
    """Two-link planar arm reaching a random target in a 0.2 m disc; fingertip Jacobian available."""
    return build_rig(TASKS["Reacher-v5"], variant=variant)


@register_rig("Pusher-v5")
def pusher_rig(variant: Any = None) -> Rig:
    """Seven-joint arm pushing a cylinder to a goal; fingertip (tips_arm) Jacobian available."""
    return build_rig(TASKS["Pusher-v5"], variant=variant)


@register_rig("Hopper-v5")
def hopper_rig(variant: Any = None) -> Rig:
    """One-legged planar hopper running forward; ends when it falls."""
    return build_rig(TASKS["Hopper-v5"], variant=variant)


@register_rig("Walker2d-v5")
def walker2d_rig(variant: Any = None) -> Rig:
    """Two-legged planar walker running forward; ends when it falls."""
    return build_rig(TASKS["Walker2d-v5"], variant=variant)


@register_rig("HalfCheetah-v5")
def half_cheetah_rig(variant: Any = None) -> Rig:
    """Planar cheetah running forward; never terminates."""
    return build_rig(TASKS["HalfCheetah-v5"], variant=variant)


@register_rig("Ant-v5")
def ant_rig(variant: Any = None) -> Rig:
    """Four-legged ant walking along +x; ends when the torso leaves 0.2..1.0 m."""
    return build_rig(TASKS["Ant-v5"], variant=variant)


@register_rig("InvertedPendulum-v5")
def inverted_pendulum_rig(variant: Any = None) -> Rig:
    """Cart-pole balance; ends when the pole tilts more than 0.2 rad."""
    return build_rig(TASKS["InvertedPendulum-v5"], variant=variant)
