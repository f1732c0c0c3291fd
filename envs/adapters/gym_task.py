"""A gymnasium MuJoCo task described as data (``GymTask``) and the generic rig builder over it.

The builder loads gymnasium's own asset XML into an ``MjSpec``, names the
asset's unnamed bodies, adds the sensors the named quantities read and a site
per body that needs one (Jacobians, variant targets), applies a task variant
if given, and compiles. Sensors and sites do not enter the dynamics, so the
rig's qpos/qvel trajectory is bit-identical to gymnasium's env (tested).
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

import mujoco
import numpy as np

from ..named_state import Quantity, StateLayout
from ..rig import ObserveFn, RewardFn, Rig, TerminatedFn
from .readings import Reading, name_unnamed_bodies
from .variant_hooks import FixedGoal, goal_coordinates, prepare_variant

__all__ = ["Named", "GymTask", "asset_path", "load_spec", "build_rig", "task_layout", "site_name"]

# VariantTargets fields a task declares; payload_body and target_site are added by variant_hooks.
_VARIANT_TARGET_KEYS = ("floor_geom", "foot_geoms", "damped_joints", "actuators", "task_fields")


@dataclass(frozen=True)
class Named:
    """One named quantity of a task: a raw ``reading`` or a ``derive`` function of earlier quantities.

    ``shape`` defaults to ``(size,)`` of the reading; scalars say ``()``.
    ``derived`` marks values computed by the model (positions of bodies,
    contact forces) rather than raw coordinates, so the static checker may
    relax them.
    """

    name: str
    unit: str
    meaning: str
    reading: Reading | None = None
    derive: Callable[[Mapping[str, np.ndarray]], np.ndarray] | None = None
    shape: tuple[int, ...] | None = None
    derived: bool = False

    def __post_init__(self) -> None:
        if (self.reading is None) == (self.derive is None):
            raise ValueError(f"quantity {self.name}: give exactly one of reading or derive")
        if self.derive is not None and self.shape is None:
            raise ValueError(f"quantity {self.name}: a derived quantity needs an explicit shape")

    def shape_in(self, model: mujoco.MjModel) -> tuple[int, ...]:
        if self.shape is not None:
            return self.shape
        return (self.reading.size(model),)


@dataclass(frozen=True, eq=False)
class GymTask:
    """Everything that makes a rig for one gymnasium MuJoCo env id.

    ``reward`` is a factory ``reward(dt) -> RewardFn`` (locomotion rewards need
    the env step's duration). ``start`` is a callable ``(model, rng, n)`` with a
    ``qpos_support(model)`` method (see ``resets.py``). ``sites`` lists bodies
    that get a site at their frame origin (``site_name(body)``); ``jacobian``
    maps a quantity to one of those bodies. ``targets`` are keyword arguments
    of ``envs.variants.VariantTargets`` for this robot; ``payload_parent`` is
    the body a variant's payload is welded to and ``goal`` the (body, slide
    joints) that a variant's ``target_position`` places (see ``variant_hooks``).
    """

    env_id: str
    asset: str
    frame_skip: int
    max_episode_steps: int
    robot: str
    quantities: tuple[Named, ...]
    reward: Callable[[float], RewardFn]
    terminated: TerminatedFn
    observe: ObserveFn
    start: Any
    camera: str | None = None
    sites: tuple[str, ...] = ()
    jacobian: Mapping[str, str] = field(default_factory=dict)
    targets: Mapping[str, Any] = field(default_factory=dict)
    payload_parent: str | None = None
    goal: tuple[str, tuple[str, ...]] | None = None
    notes: str = ""
    legged: bool = False  # a walking machine: its own type standards apply (see library/safety.py)

    def __post_init__(self) -> None:
        if self.frame_skip < 1:
            raise ValueError(f"{self.env_id}: frame_skip must be >= 1, got {self.frame_skip}")
        names = [q.name for q in self.quantities]
        for needed in ("qpos", "qvel", "torque"):
            if needed not in names:
                raise ValueError(f"{self.env_id}: named state must include {needed!r}, got {names}")
        for quantity, body in self.jacobian.items():
            if quantity not in names or body not in self.sites:
                raise ValueError(
                    f"{self.env_id}: jacobian entry {quantity!r} -> {body!r} needs a quantity of that name "
                    f"and the body in sites {self.sites}"
                )
        unknown = sorted(set(self.targets) - set(_VARIANT_TARGET_KEYS))
        if unknown:
            raise ValueError(f"{self.env_id}: unknown variant target keys {unknown}; known: {list(_VARIANT_TARGET_KEYS)}")


def site_name(body: str) -> str:
    """Name of the site the builder adds at ``body``'s frame origin."""
    return f"kt_site_{body}"


def asset_path(asset: str) -> str:
    """Full path of one of gymnasium's MuJoCo asset files."""
    import gymnasium.envs.mujoco as gym_mujoco

    path = os.path.join(os.path.dirname(gym_mujoco.__file__), "assets", asset)
    if not os.path.exists(path):
        raise FileNotFoundError(f"gymnasium asset {asset!r} not found at {path}; is gymnasium[mujoco] >= 1.0 installed?")
    return path


def load_spec(asset: str) -> mujoco.MjSpec:
    """gymnasium's asset as an MjSpec, unnamed bodies named ``body<i>``."""
    spec = mujoco.MjSpec.from_file(asset_path(asset))
    name_unnamed_bodies(spec)
    return spec


def _compile(spec: mujoco.MjSpec) -> mujoco.MjModel:
    with warnings.catch_warnings():
        # half_cheetah.xml uses compiler/settotalmass, which MuJoCo flags as deprecated; gymnasium loads it as is.
        warnings.filterwarnings("ignore", message=".*settotalmass.*")
        return spec.compile()


def task_layout(task: GymTask, model: mujoco.MjModel, *, start: Any = None) -> StateLayout:
    """The task's named-state layout for ``model`` (gymnasium's plain model or the rig's compiled one).

    Joint envelopes are widened to the qpos support of ``start`` (default: the task's).
    """
    support = (start if start is not None else task.start).qpos_support(model)
    quantities = []
    for named in task.quantities:
        low = high = None
        if named.reading is not None:
            low, high = named.reading.envelope(model, support)
        quantities.append(
            Quantity(
                name=named.name,
                shape=named.shape_in(model),
                unit=named.unit,
                meaning=named.meaning,
                low=low,
                high=high,
                derived=named.derived,
            )
        )
    return StateLayout(tuple(quantities))


def build_rig(task: GymTask, *, variant: Any = None) -> Rig:
    """Compile ``task``'s model with its sensors (and ``variant``) and describe it as a Rig.

    ``variant`` is anything ``envs.variants.resolve_variant`` takes (a TaskVariant,
    a YAML path, a mapping); the rig records the resolved TaskVariant.
    """
    spec = load_spec(task.asset)
    for named in task.quantities:
        if named.reading is not None:
            named.reading.install(spec)
    for body in task.sites:
        spec.body(body).add_site(name=site_name(body), pos=[0.0, 0.0, 0.0], size=[0.005, 0.005, 0.005], group=5)
    if variant is not None:
        variant = prepare_variant(
            spec,
            robot=task.robot,
            targets=dict(task.targets),
            payload_parent=task.payload_parent,
            has_goal=task.goal is not None,
            variant=variant,
        )
    model = _compile(spec)
    start = task.start
    if variant is not None and variant.target_position is not None and task.goal is not None:
        start = FixedGoal(start, *goal_coordinates(model, task.goal[0], task.goal[1], variant.target_position))

    sources = {q.name: q.reading.source(model) for q in task.quantities if q.reading is not None}
    derived = {q.name: q.derive for q in task.quantities if q.derive is not None}
    actuated_joint = [int(j) for j in model.actuator_trnid[:, 0]]
    if any(int(t) != mujoco.mjtTrn.mjTRN_JOINT for t in model.actuator_trntype):
        raise ValueError(f"{task.env_id}: every actuator must drive a joint, got transmission types {model.actuator_trntype}")
    camera = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_CAMERA, task.camera) if task.camera else -1
    dt = float(model.opt.timestep) * task.frame_skip
    return Rig(
        env_id=task.env_id,
        model=model,
        frame_skip=task.frame_skip,
        layout=task_layout(task, model, start=start),
        sources=sources,
        derived=derived,
        reward=task.reward(dt),
        terminated=task.terminated,
        observe=task.observe,
        start=start,
        jacobian_sites={q: int(model.site(site_name(b)).id) for q, b in task.jacobian.items()},
        actuated_qpos=tuple(int(model.jnt_qposadr[j]) for j in actuated_joint),
        actuated_qvel=tuple(int(model.jnt_dofadr[j]) for j in actuated_joint),
        variant=variant,
        max_episode_steps=task.max_episode_steps,
        metadata={
            "robot": task.robot,
            "legged": task.legged,
            "camera": int(camera),
            "gymnasium_id": task.env_id,
            "asset": task.asset,
            "notes": task.notes,
        },
    )
