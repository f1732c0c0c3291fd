"""How a raw named quantity is read: sensors added to the MjSpec, the rig's Source, live MjData fields.

Each reading kind does three jobs that must agree:

- ``install(spec)`` adds the MuJoCo sensors it needs to an ``MjSpec`` (named
  by content, ``kt_<kind>_<object>``, so two quantities that share a sensor
  install it once);
- ``source(model)`` says where the compiled model keeps the value (a slice of
  qpos, qvel, ctrl or sensordata), which is what both execution paths read;
- ``live(model, data)`` computes the same value from plain ``MjData`` fields
  (``xpos``, ``mj_objectVelocity``, ``mj_contactForce``...) for a model that has
  no added sensors, such as a live gymnasium env.

Tests compare ``source`` against ``live`` on identical states, so the sensor
path is checked against MuJoCo's own arrays.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Protocol

import mujoco
import numpy as np

from ..rig import Source

__all__ = [
    "Reading",
    "Coordinate",
    "BodyFrame",
    "BodyContact",
    "SubtreeCom",
    "body_id",
    "name_unnamed_bodies",
    "joint_envelope",
]

_UNNAMED = re.compile(r"body(\d+)")


def name_unnamed_bodies(spec: mujoco.MjSpec) -> None:
    """Give every unnamed body the name ``body<i>`` (its id), so sensors can refer to it.

    Call before any edit that adds bodies: ``i`` is the body's id in the
    asset as gymnasium compiles it.
    """
    taken = {body.name for body in spec.bodies}
    for i, body in enumerate(spec.bodies):
        if i > 0 and not body.name:
            if f"body{i}" in taken:
                raise ValueError(f"cannot name unnamed body {i} 'body{i}': the name is taken; rename that body in the MJCF")
            body.name = f"body{i}"


def body_id(model: mujoco.MjModel, name: str) -> int:
    """Id of a body by name; ``body<i>`` also finds an unnamed body ``i`` (see ``name_unnamed_bodies``)."""
    found = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_BODY, name)
    if found >= 0:
        return int(found)
    match = _UNNAMED.fullmatch(name)
    if match and int(match.group(1)) < model.nbody and not model.body(int(match.group(1))).name:
        return int(match.group(1))
    raise KeyError(f"body {name!r} not found in model; bodies: {[model.body(i).name for i in range(model.nbody)]}")


def _sensor_indices(model: mujoco.MjModel, name: str, offsets: tuple[int, ...]) -> tuple[int, ...]:
    sensor = model.sensor(name)
    adr, dim = int(sensor.adr[0]), int(sensor.dim[0])
    if any(o >= dim for o in offsets):
        raise ValueError(f"sensor {name} has {dim} values, asked for offsets {offsets}")
    return tuple(adr + o for o in offsets)


def _add_sensor(spec: mujoco.MjSpec, name: str, **fields) -> None:
    if any(s.name == name for s in spec.sensors):
        return
    sensor = spec.add_sensor()
    sensor.name = name
    for key, value in fields.items():
        setattr(sensor, key, value)


def joint_envelope(model: mujoco.MjModel, index: tuple[int, ...], support: tuple[np.ndarray, np.ndarray] | None):
    """Per-qpos-entry bounds: joint range where limited (hull with the start support), quaternions in [-1, 1].

    Returns ``(low, high)`` tuples, or ``(None, None)`` when no entry is bounded.
    """
    low = np.full(model.nq, -math.inf)
    high = np.full(model.nq, math.inf)
    for j in range(model.njnt):
        adr = int(model.jnt_qposadr[j])
        kind = int(model.jnt_type[j])
        if kind == mujoco.mjtJoint.mjJNT_FREE:
            low[adr + 3 : adr + 7], high[adr + 3 : adr + 7] = -1.0, 1.0
        elif kind == mujoco.mjtJoint.mjJNT_BALL:
            low[adr : adr + 4], high[adr : adr + 4] = -1.0, 1.0
        elif model.jnt_limited[j]:
            lo, hi = model.jnt_range[j]
            if support is not None:
                lo, hi = min(lo, support[0][adr]), max(hi, support[1][adr])
            low[adr], high[adr] = lo, hi
    low, high = low[list(index)], high[list(index)]
    if not (np.isfinite(low).any() or np.isfinite(high).any()):
        return None, None
    return tuple(float(v) for v in low), tuple(float(v) for v in high)


class Reading(Protocol):
    """One raw quantity, readable from sensors (rig) and from MjData fields (live env)."""

    def size(self, model: mujoco.MjModel) -> int: ...
    def install(self, spec: mujoco.MjSpec) -> None: ...
    def source(self, model: mujoco.MjModel) -> Source: ...
    def live(self, model: mujoco.MjModel, data: mujoco.MjData) -> np.ndarray: ...
    def envelope(self, model: mujoco.MjModel, support) -> tuple[tuple[float, ...] | None, tuple[float, ...] | None]: ...


@dataclass(frozen=True)
class Coordinate:
    """Entries of qpos, qvel or ctrl: all of them, or ``components`` of one joint's block.

    ``ctrl`` reads are clipped to the actuator range in the live path, as the rig
    clips actions before writing them (gymnasium writes raw actions and MuJoCo
    clamps them inside the step).
    """

    field: str
    joint: str | None = None
    components: tuple[int, ...] = (0,)

    def __post_init__(self) -> None:
        if self.field not in ("qpos", "qvel", "ctrl"):
            raise ValueError(f"coordinate field must be qpos, qvel or ctrl, got {self.field!r}")
        if self.field == "ctrl" and self.joint is not None:
            raise ValueError(f"ctrl coordinates read all actuators; got joint {self.joint!r}")

    def _index(self, model: mujoco.MjModel) -> tuple[int, ...]:
        if self.joint is None:
            total = {"qpos": model.nq, "qvel": model.nv, "ctrl": model.nu}[self.field]
            return tuple(range(total))
        joint = model.joint(self.joint)
        adr = int(joint.qposadr[0] if self.field == "qpos" else joint.dofadr[0])
        return tuple(adr + c for c in self.components)

    def size(self, model: mujoco.MjModel) -> int:
        return len(self._index(model))

    def install(self, spec: mujoco.MjSpec) -> None:
        return None

    def source(self, model: mujoco.MjModel) -> Source:
        return Source(self.field, self._index(model))

    def live(self, model: mujoco.MjModel, data: mujoco.MjData) -> np.ndarray:
        values = np.array(getattr(data, self.field)[list(self._index(model))], dtype=np.float64)
        if self.field == "ctrl":
            limited = model.actuator_ctrllimited.astype(bool)
            lo, hi = model.actuator_ctrlrange[:, 0], model.actuator_ctrlrange[:, 1]
            values = np.where(limited, np.clip(values, lo, hi), values)
        return values

    def envelope(self, model: mujoco.MjModel, support):
        if self.field == "qpos":
            return joint_envelope(model, self._index(model), support)
        if self.field == "ctrl" and model.nu and model.actuator_ctrllimited.all():
            return tuple(map(float, model.actuator_ctrlrange[:, 0])), tuple(map(float, model.actuator_ctrlrange[:, 1]))
        return None, None


@dataclass(frozen=True)
class BodyFrame:
    """Position (``framepos``) or linear velocity (``framelinvel``) of a body's frame origin, world axes.

    The body frame (MuJoCo ``xbody``: ``data.xpos``), not its centre of mass,
    matching gymnasium's ``get_body_com``, which returns ``data.body(name).xpos``.
    """

    kind: str
    body: str
    components: tuple[int, ...] = (0, 1, 2)

    def __post_init__(self) -> None:
        if self.kind not in ("pos", "linvel"):
            raise ValueError(f"body frame kind must be 'pos' or 'linvel', got {self.kind!r}")

    @property
    def _name(self) -> str:
        return f"kt_frame{self.kind}_{self.body}"

    def size(self, model: mujoco.MjModel) -> int:
        return len(self.components)

    def install(self, spec: mujoco.MjSpec) -> None:
        kind = mujoco.mjtSensor.mjSENS_FRAMEPOS if self.kind == "pos" else mujoco.mjtSensor.mjSENS_FRAMELINVEL
        _add_sensor(spec, self._name, type=kind, objtype=mujoco.mjtObj.mjOBJ_XBODY, objname=self.body)

    def source(self, model: mujoco.MjModel) -> Source:
        return Source("sensordata", _sensor_indices(model, self._name, self.components))

    def live(self, model: mujoco.MjModel, data: mujoco.MjData) -> np.ndarray:
        bid = body_id(model, self.body)
        if self.kind == "pos":
            values = data.xpos[bid]
        else:
            spatial = np.zeros(6)
            mujoco.mj_objectVelocity(model, data, mujoco.mjtObj.mjOBJ_XBODY, bid, spatial, 0)
            values = spatial[3:]
        return np.array(values[list(self.components)], dtype=np.float64)

    def envelope(self, model: mujoco.MjModel, support):
        return None, None


_CONTACT_PARTS = {"force": 0, "torque": 3, "point": 6}
# contact sensor parameters: data = force | torque | pos (bits 1, 2, 4 of mjtConDataField), reduce = netforce (3), num = 1
_CONTACT_INTPRM = np.array([(1 << 1) | (1 << 2) | (1 << 4), 3, 1])


@dataclass(frozen=True)
class BodyContact:
    """Net contact force on each of ``bodies`` (MuJoCo contact sensor, ``reduce="netforce"``), world axes.

    ``part`` selects ``force`` (N, the force the body receives), ``torque``
    (N m, about ``point``) or ``point`` (m, the force-weighted centroid of the
    body's contacts; 0 when the body touches nothing or every force is 0).
    The sensor matches the body as ``body2``, so the normal points into the body
    and the force is the force *on* it.
    """

    bodies: tuple[str, ...]
    part: str = "force"

    def __post_init__(self) -> None:
        if self.part not in _CONTACT_PARTS:
            raise ValueError(f"contact part must be one of {sorted(_CONTACT_PARTS)}, got {self.part!r}")
        if not self.bodies:
            raise ValueError("contact reading needs at least one body")

    def size(self, model: mujoco.MjModel) -> int:
        return 3 * len(self.bodies)

    def install(self, spec: mujoco.MjSpec) -> None:
        for body in self.bodies:
            _add_sensor(
                spec,
                f"kt_contact_{body}",
                type=mujoco.mjtSensor.mjSENS_CONTACT,
                reftype=mujoco.mjtObj.mjOBJ_BODY,
                refname=body,
                intprm=_CONTACT_INTPRM,
            )

    def source(self, model: mujoco.MjModel) -> Source:
        offset = _CONTACT_PARTS[self.part]
        index: tuple[int, ...] = ()
        for body in self.bodies:
            index += _sensor_indices(model, f"kt_contact_{body}", (offset, offset + 1, offset + 2))
        return Source("sensordata", index)

    def live(self, model: mujoco.MjModel, data: mujoco.MjData) -> np.ndarray:
        rows = [net_contact(model, data, body_id(model, b))[_CONTACT_PARTS[self.part] // 3] for b in self.bodies]
        return np.concatenate(rows)

    def envelope(self, model: mujoco.MjModel, support):
        return None, None


def net_contact(model: mujoco.MjModel, data: mujoco.MjData, body: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(force, torque about point, point) of all contacts on ``body``, world axes, from ``mjData.contact``.

    The same reduction as MuJoCo's contact sensor with ``reduce="netforce"``:
    the point is the centroid of the contact positions weighted by the norm of
    each contact force, and the torque is taken about it.
    """
    forces, torques, points = [], [], []
    local = np.zeros(6)
    for i in range(data.ncon):
        contact = data.contact[i]
        b1, b2 = int(model.geom_bodyid[contact.geom[0]]), int(model.geom_bodyid[contact.geom[1]])
        if body not in (b1, b2):
            continue
        mujoco.mj_contactForce(model, data, i, local)
        frame = contact.frame.reshape(3, 3)  # rows: normal (geom1 -> geom2), tangent, tangent
        sign = 1.0 if b2 == body else -1.0  # the contact force acts on geom2 along the normal
        forces.append(sign * frame.T @ local[:3])
        torques.append(sign * frame.T @ local[3:])
        points.append(np.array(contact.pos))
    if not forces:
        zero = np.zeros(3)
        return zero, zero.copy(), zero.copy()
    f, t, p = np.array(forces), np.array(torques), np.array(points)
    weight = np.linalg.norm(f, axis=1)
    total = weight.sum()
    point = (weight[:, None] * p).sum(axis=0) / total if total > 0 else np.zeros(3)
    torque = t.sum(axis=0) + np.cross(p - point, f).sum(axis=0)
    return f.sum(axis=0), torque, point


@dataclass(frozen=True)
class SubtreeCom:
    """Centre of mass of a body's subtree (``subtreecom`` sensor; ``data.subtree_com``), world frame."""

    body: str

    @property
    def _name(self) -> str:
        return f"kt_subtreecom_{self.body}"

    def size(self, model: mujoco.MjModel) -> int:
        return 3

    def install(self, spec: mujoco.MjSpec) -> None:
        _add_sensor(spec, self._name, type=mujoco.mjtSensor.mjSENS_SUBTREECOM, objtype=mujoco.mjtObj.mjOBJ_BODY, objname=self.body)

    def source(self, model: mujoco.MjModel) -> Source:
        return Source("sensordata", _sensor_indices(model, self._name, (0, 1, 2)))

    def live(self, model: mujoco.MjModel, data: mujoco.MjData) -> np.ndarray:
        return np.array(data.subtree_com[body_id(model, self.body)], dtype=np.float64)

    def envelope(self, model: mujoco.MjModel, support):
        return None, None
