"""Rig: one robot on one task, described for batched simulation.

A rig is what both execution paths share: the gymnasium env (one MuJoCo
``MjData``) and the batched runtime (``mujoco.batch.Batch``). It holds the
compiled model with the task variant applied, the frame skip, the named-state
layout and how to read it from raw MuJoCo arrays, and the task's reward and
termination as pure numpy functions over batched named state. Because both
paths call the same functions on the same arrays, they agree bit for bit.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

import numpy as np

from .named_state import Quantity, StateLayout, StateValues

__all__ = [
    "Source",
    "Rig",
    "RewardFn",
    "TerminatedFn",
    "ObserveFn",
    "read_state",
    "register_rig",
    "make_rig",
    "rig_ids",
]

# (state_before, action (B, n_act), state_after) -> (total (B,), {term: (B,)})
RewardFn = Callable[[StateValues, np.ndarray, StateValues], tuple[np.ndarray, dict[str, np.ndarray]]]
# state -> (B,) bool: the robot is in an unrecoverable state (fell, left the workspace)
TerminatedFn = Callable[[StateValues], np.ndarray]
# state -> (B, n_obs) float64: the gymnasium observation vector
ObserveFn = Callable[[StateValues], np.ndarray]


@dataclass(frozen=True)
class Source:
    """Where a raw quantity lives: a slice of qpos, qvel, sensordata or ctrl.

    ``field`` is one of ``qpos``, ``qvel``, ``sensordata``, ``ctrl``; ``index``
    lists the flat indices read, reshaped to the quantity's shape.
    """

    field: str
    index: tuple[int, ...]

    def __post_init__(self) -> None:
        if self.field not in ("qpos", "qvel", "sensordata", "ctrl"):
            raise ValueError(f"source field must be qpos, qvel, sensordata or ctrl, got {self.field!r}")


@dataclass(frozen=True, eq=False)
class Rig:
    """A robot model plus task, ready for single or batched stepping.

    ``sources`` maps raw quantities to MuJoCo arrays; ``derived`` computes the
    rest from already-read values, in order (name -> fn(values) -> (B, *shape)).
    ``jacobian_sites`` names sites whose translational Jacobian a controller
    may request as ``<quantity>_jac`` (B, 3, nv); the runtime computes it.
    ``start`` samples start states: ``start(model, rng, n) -> (qpos, qvel)``.
    ``actuated_qpos``/``actuated_qvel`` give, per actuator, the joint it drives.
    """

    env_id: str
    model: Any  # mujoco.MjModel
    frame_skip: int
    layout: StateLayout
    sources: Mapping[str, Source]
    reward: RewardFn
    terminated: TerminatedFn
    observe: ObserveFn
    start: Callable[[Any, np.random.Generator, int], tuple[np.ndarray, np.ndarray]]
    derived: Mapping[str, Callable[[dict[str, np.ndarray]], np.ndarray]] = field(default_factory=dict)
    jacobian_sites: Mapping[str, int] = field(default_factory=dict)
    actuated_qpos: tuple[int, ...] = ()
    actuated_qvel: tuple[int, ...] = ()
    variant: Any = None  # envs.variants.TaskVariant or None
    max_episode_steps: int = 1000
    metadata: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.frame_skip < 1:
            raise ValueError(f"frame_skip must be >= 1, got {self.frame_skip}")
        missing = [q.name for q in self.layout if q.name not in self.sources and q.name not in self.derived]
        if missing:
            raise ValueError(f"rig {self.env_id}: no source for quantities {missing}")

    @property
    def n_act(self) -> int:
        return int(self.model.nu)

    @property
    def action_low(self) -> np.ndarray:
        return self.model.actuator_ctrlrange[:, 0].copy()

    @property
    def action_high(self) -> np.ndarray:
        return self.model.actuator_ctrlrange[:, 1].copy()

    @property
    def dt(self) -> float:
        """Seconds of simulated time per env step."""
        return float(self.model.opt.timestep) * self.frame_skip


def read_state(
    rig: Rig,
    *,
    qpos: np.ndarray,
    qvel: np.ndarray,
    sensordata: np.ndarray,
    ctrl: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Named state from raw batched arrays (B, nq), (B, nv), (B, nsensordata), (B, nu).

    1-D arrays count as a batch of one. Every value is a fresh array (never a
    view of the inputs), ordered as ``rig.sources`` then ``rig.derived``. The
    index arrays and shapes are worked out once per rig (``_read_plan``), so a
    call costs one ``take`` per quantity: this runs once per env step.
    """
    plan = _read_plan(rig)
    raw = [_as_2d(qpos), _as_2d(qvel), _as_2d(sensordata), None]
    batch = raw[0].shape[0]
    if plan.reads_ctrl:
        raw[3] = np.zeros((batch, rig.model.nu)) if ctrl is None else _as_2d(ctrl)
    for slot in plan.fields:
        if raw[slot].shape[0] != batch:
            raise ValueError(
                f"read_state: {_FIELDS[slot]} must have the batch size of qpos ({batch}), "
                f"got shape {raw[slot].shape}; pass one row per simulation in every array"
            )
    values: dict[str, np.ndarray] = {}
    for name, slot, index, shape in plan.sources:
        value = raw[slot].take(index, axis=1)
        values[name] = value if shape is None else value.reshape((batch, *shape))
    for name, fn, shape in plan.derived:
        values[name] = np.asarray(fn(values), dtype=np.float64).reshape((batch, *shape))
    return values


_FIELDS = ("qpos", "qvel", "sensordata", "ctrl")


@dataclass(frozen=True)
class _ReadPlan:
    """How to read one rig's named state: per source (name, field slot, index, shape or None).

    ``index`` is an int for scalar quantities (``take`` then yields (B,)) and an
    intp array otherwise; ``shape`` is None when ``take`` already gives
    (B, *shape), i.e. for scalars and vectors.
    """

    sources: tuple[tuple[str, int, Any, tuple[int, ...] | None], ...]
    derived: tuple[tuple[str, Callable[[dict[str, np.ndarray]], np.ndarray], tuple[int, ...]], ...]
    fields: tuple[int, ...]  # slots read by at least one source
    reads_ctrl: bool


# rig -> plan; weak keys so a dropped rig frees its plan. Rigs are immutable
# (frozen, and their sources/derived mappings are not changed after build).
_PLANS: "weakref.WeakKeyDictionary[Rig, _ReadPlan]" = weakref.WeakKeyDictionary()


def _read_plan(rig: Rig) -> _ReadPlan:
    try:
        return _PLANS[rig]
    except KeyError:
        plan = _PLANS[rig] = _make_plan(rig)
        return plan


def _make_plan(rig: Rig) -> _ReadPlan:
    sources = []
    for name, src in rig.sources.items():
        shape = tuple(rig.layout[name].shape)
        size = int(np.prod(shape, dtype=np.int64))
        if len(src.index) != size:
            raise ValueError(
                f"rig {rig.env_id}: source of {name!r} must list {size} indices for shape {shape}, "
                f"got {len(src.index)}; fix the rig's sources"
            )
        slot = _FIELDS.index(src.field)
        if shape == ():
            sources.append((name, slot, int(src.index[0]), None))
        else:
            index = np.asarray(src.index, dtype=np.intp).reshape(-1)
            sources.append((name, slot, index, None if len(shape) == 1 else shape))
    derived = tuple((name, fn, tuple(rig.layout[name].shape)) for name, fn in rig.derived.items())
    fields = tuple(sorted({slot for _, slot, _, _ in sources}))
    return _ReadPlan(sources=tuple(sources), derived=derived, fields=fields, reads_ctrl=3 in fields)


def _as_2d(a: Any) -> np.ndarray:
    if type(a) is np.ndarray and a.ndim == 2:
        return a
    return np.atleast_2d(a)


_RIG_BUILDERS: dict[str, Callable[..., Rig]] = {}


def register_rig(env_id: str) -> Callable[[Callable[..., Rig]], Callable[..., Rig]]:
    """Decorator: ``builder(variant=None) -> Rig`` becomes ``make_rig(env_id)``."""

    def wrap(builder: Callable[..., Rig]) -> Callable[..., Rig]:
        if env_id in _RIG_BUILDERS:
            raise ValueError(f"rig {env_id!r} is already registered")
        _RIG_BUILDERS[env_id] = builder
        return builder

    return wrap


def _load_builtin_rigs() -> None:
    # Importing the modules runs their @register_rig decorators.
    from . import catalog  # noqa: F401


def make_rig(env_id: str, *, variant: Any = None) -> Rig:
    """Build the rig for ``env_id`` with an optional task variant applied."""
    _load_builtin_rigs()
    try:
        builder = _RIG_BUILDERS[env_id]
    except KeyError:
        import difflib

        close = difflib.get_close_matches(env_id, list(_RIG_BUILDERS), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise KeyError(
            f"unknown env {env_id!r}{hint} Known envs: {', '.join(sorted(_RIG_BUILDERS))}"
        ) from None
    return builder(variant=variant)


def rig_ids() -> list[str]:
    """Every env id that has a rig."""
    _load_builtin_rigs()
    return sorted(_RIG_BUILDERS)
