"""How task variants reach gymnasium's assets: a payload body, a target marker and a fixed goal.

``envs.variants.apply_variant`` edits an MjSpec through ``VariantTargets``.
gymnasium's robots need two things it cannot find in their assets:

- ``payload_mass`` wants a body with an explicit inertial; the assets infer
  every inertia from geoms. ``kt_payload``, a geomless body welded at the
  frame origin of the robot's payload parent (torso, fingertip, pole), is
  added only when a variant sets a payload, with
  ``compiler.inertiafromgeom="auto"`` so the other bodies keep their
  geom-derived inertia exactly.
- ``target_position`` moves a site; Reacher's target and Pusher's goal are
  bodies on slide joints that gymnasium's reset places. The variant moves the
  world site ``kt_target_marker`` and the initial-states distribution puts the goal
  joints where the target body's frame coincides with that marker.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import mujoco
import numpy as np

from .. import variants

__all__ = ["PAYLOAD_BODY", "TARGET_MARKER", "prepare_variant", "FixedGoal", "goal_coordinates"]

PAYLOAD_BODY = "kt_payload"
TARGET_MARKER = "kt_target_marker"
# Nominal payload before the variant sets its mass: 1 kg solid sphere of radius 0.05 m (I = 2/5 m r^2).
_PAYLOAD_INERTIA = 0.4 * 1.0 * 0.05**2


def prepare_variant(spec: mujoco.MjSpec, *, robot: str, targets: dict[str, Any], payload_parent: str | None,
                    has_goal: bool, variant: Any) -> "variants.TaskVariant":
    """Resolve ``variant`` (path, mapping or TaskVariant), add what it needs to ``spec``, apply it."""
    resolved = variants.resolve_variant(variant)
    chosen = dict(targets)
    if resolved.payload_mass is not None and payload_parent is not None:
        spec.compiler.inertiafromgeom = mujoco.mjtInertiaFromGeom.mjINERTIAFROMGEOM_AUTO
        body = spec.body(payload_parent).add_body(name=PAYLOAD_BODY)
        body.explicitinertial = True
        body.mass = 1.0
        body.inertia = [_PAYLOAD_INERTIA] * 3
        chosen["payload_body"] = PAYLOAD_BODY
    if resolved.target_position is not None and has_goal:
        spec.worldbody.add_site(name=TARGET_MARKER, size=[0.01, 0.01, 0.01], group=5)
        chosen["target_site"] = TARGET_MARKER
    variants.apply_variant(spec, resolved, variants.VariantTargets(robot=robot, **chosen))
    return resolved


def goal_coordinates(model: mujoco.MjModel, body: str, joints: tuple[str, ...], position) -> tuple[tuple[int, ...], tuple[float, ...]]:
    """qpos indices and values of ``joints`` (slides of a child of the world) putting ``body``'s frame at ``position``."""
    bid = model.body(body).id
    if model.body_parentid[bid] != 0:
        raise ValueError(f"goal body {body!r} must be a child of the world body to be placed by its slide joints")
    offset = np.asarray(position, dtype=np.float64) - model.body_pos[bid]
    index, values, axes = [], [], []
    for name in joints:
        joint = model.joint(name)
        if int(joint.type[0]) != mujoco.mjtJoint.mjJNT_SLIDE or int(joint.bodyid[0]) != bid:
            raise ValueError(f"goal joint {name!r} must be a slide joint of body {body!r}")
        axis = np.asarray(joint.axis, dtype=np.float64)
        axes.append(axis)
        index.append(int(joint.qposadr[0]))
        values.append(float(model.qpos0[int(joint.qposadr[0])] + offset @ axis))
    rest = offset - sum(((offset @ a) * a for a in axes), np.zeros(3))
    if np.linalg.norm(rest) > 1e-9:
        reach = model.body_pos[bid]
        raise ValueError(
            f"target_position must lie in the plane the {body!r} body slides in (through {reach.tolist()} along "
            f"{[a.tolist() for a in axes]}), got {list(position)}; off by {rest.tolist()} m"
        )
    return tuple(index), tuple(values)


@dataclass(frozen=True)
class FixedGoal:
    """An initial-states distribution with the goal coordinates pinned (``qpos[:, index] = values``).

    Draws exactly as ``base`` does, so the rest of the start state keeps its distribution.
    """

    base: Any
    index: tuple[int, ...]
    values: tuple[float, ...]

    def __call__(self, model, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        qpos, qvel = self.base(model, rng, n)
        qpos[:, list(self.index)] = self.values
        return qpos, qvel

    def qpos_support(self, model) -> tuple[np.ndarray, np.ndarray]:
        low, high = self.base.qpos_support(model)
        low, high = np.array(low, dtype=np.float64), np.array(high, dtype=np.float64)
        low[list(self.index)] = self.values
        high[list(self.index)] = self.values
        return low, high
