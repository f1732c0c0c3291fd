"""Initial states: a nominal pose plus noise, optionally kept inside a box or ball.

An initial-states file says where episodes begin. It is a frozen value object
(loaded from YAML or built in code) that samples ``(qpos, qvel)`` batches from a
model and a numpy Generator, deterministically for the generator's seed.
Constraints over named quantities (e.g. the fingertip within 5 cm of the pick
site) are met by rejection sampling with a bounded number of tries; the caller
supplies ``named_state(qpos, qvel) -> dict`` (see ``forward_named_state``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

import mujoco
import numpy as np

from .errors import EnvConfigError
from .variants import LinedDict, read_yaml_with_lines, sort_problems

__all__ = [
    "Noise",
    "BallConstraint",
    "BoxConstraint",
    "StartDistribution",
    "load_start",
    "start_from_mapping",
    "forward_named_state",
    "rig_named_state",
    "RigStart",
    "NamedStateFn",
    "respect_joints",
]

# (qpos (n, nq), qvel (n, nv)) -> name -> (n, *shape)
NamedStateFn = Callable[[np.ndarray, np.ndarray], Mapping[str, np.ndarray]]

_DISTRIBUTIONS = ("uniform", "gaussian")


def _finite(x: Any) -> bool:
    return not isinstance(x, bool) and isinstance(x, (int, float)) and np.isfinite(x)


@dataclass(frozen=True)
class Noise:
    """Per-coordinate noise: ``uniform`` (scale = half-width) or ``gaussian`` (scale = std).

    ``scale`` is one number for every coordinate, a tuple with one entry per
    coordinate (nq for qpos, nv for qvel), or ``((joint_name, scale), ...)``
    for named joints only (the others get none).
    """

    distribution: str
    scale: float | tuple[float, ...] | tuple[tuple[str, float], ...]

    def __post_init__(self) -> None:
        if self.distribution not in _DISTRIBUTIONS:
            raise ValueError(
                f"noise distribution must be one of {', '.join(_DISTRIBUTIONS)}, got {self.distribution!r}"
            )
        values = self._values()
        if any(not _finite(v) or v < 0 for v in values):
            raise ValueError(f"noise scale must be finite and >= 0, got {self.scale!r}; use e.g. 0.02")

    def _values(self) -> list[float]:
        if isinstance(self.scale, tuple):
            return [v[1] if isinstance(v, tuple) else v for v in self.scale]
        return [self.scale]

    def per_coordinate(self, model: mujoco.MjModel, kind: str) -> np.ndarray:
        """The scale for each qpos (kind='qpos') or qvel (kind='qvel') coordinate."""
        size = model.nq if kind == "qpos" else model.nv
        if not isinstance(self.scale, tuple):
            return np.full(size, float(self.scale))
        if self.scale and isinstance(self.scale[0], tuple):
            out = np.zeros(size)
            for joint, value in self.scale:
                jid = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, joint)
                if jid < 0:
                    names = [mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_JOINT, j) for j in range(model.njnt)]
                    raise EnvConfigError([f"noise.{kind}: joint {joint!r} is not in the model; joints: {', '.join(names)}"])
                adr = model.jnt_qposadr[jid] if kind == "qpos" else model.jnt_dofadr[jid]
                width = _joint_width(model, jid, kind)
                out[adr : adr + width] = value
            return out
        if len(self.scale) != size:
            raise EnvConfigError(
                [f"noise.{kind}: has {len(self.scale)} entries, the model has {kind} size {size}; "
                 f"give one number, {size} numbers, or a mapping joint: scale"]
            )
        return np.asarray(self.scale, dtype=np.float64)

    def draw(self, rng: np.random.Generator, scale: np.ndarray, n: int) -> np.ndarray:
        if self.distribution == "uniform":
            return rng.uniform(-1.0, 1.0, size=(n, scale.size)) * scale
        return rng.standard_normal(size=(n, scale.size)) * scale


def _joint_width(model: mujoco.MjModel, jid: int, kind: str) -> int:
    jtype = int(model.jnt_type[jid])
    if jtype == mujoco.mjtJoint.mjJNT_FREE:
        return 7 if kind == "qpos" else 6
    if jtype == mujoco.mjtJoint.mjJNT_BALL:
        return 4 if kind == "qpos" else 3
    return 1


@dataclass(frozen=True)
class BallConstraint:
    """``norm(quantity - center) <= radius``; center is a vector or a site name (world position at qpos0)."""

    quantity: str
    center: tuple[float, ...] | str
    radius: float

    def __post_init__(self) -> None:
        if not _finite(self.radius) or self.radius <= 0:
            raise ValueError(f"ball radius must be a finite number > 0, got {self.radius!r}; use e.g. 0.05")

    def accept(self, values: np.ndarray, model: mujoco.MjModel) -> np.ndarray:
        center = _site_position(model, self.center) if isinstance(self.center, str) else np.asarray(self.center)
        flat = values.reshape(values.shape[0], -1)
        if center.size != flat.shape[1]:
            raise EnvConfigError(
                [f"constraints: ball center has {center.size} entries, {self.quantity} has {flat.shape[1]}; "
                 f"give a center of the quantity's size"]
            )
        return np.linalg.norm(flat - center.reshape(1, -1), axis=1) <= self.radius

    def describe(self) -> str:
        c = f"site {self.center}" if isinstance(self.center, str) else list(self.center)
        return f"norm({self.quantity} - {c}) <= {self.radius:g}"


@dataclass(frozen=True)
class BoxConstraint:
    """``low <= quantity <= high`` elementwise (flat, one bound per entry)."""

    quantity: str
    low: tuple[float, ...]
    high: tuple[float, ...]

    def __post_init__(self) -> None:
        if len(self.low) != len(self.high):
            raise ValueError(f"box low and high must have the same length, got {len(self.low)} and {len(self.high)}")
        if any(lo > hi for lo, hi in zip(self.low, self.high)):
            raise ValueError(f"box low must be <= high entrywise, got low={list(self.low)} high={list(self.high)}")

    def accept(self, values: np.ndarray, model: mujoco.MjModel) -> np.ndarray:
        flat = values.reshape(values.shape[0], -1)
        if len(self.low) != flat.shape[1]:
            raise EnvConfigError(
                [f"constraints: box has {len(self.low)} entries, {self.quantity} has {flat.shape[1]}; "
                 f"give low/high of the quantity's size"]
            )
        return np.all((flat >= np.asarray(self.low)) & (flat <= np.asarray(self.high)), axis=1)

    def describe(self) -> str:
        return f"{list(self.low)} <= {self.quantity} <= {list(self.high)}"


Constraint = BallConstraint | BoxConstraint


def _site_position(model: mujoco.MjModel, site: str) -> np.ndarray:
    sid = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_SITE, site)
    if sid < 0:
        names = [mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_SITE, s) for s in range(model.nsite)]
        raise EnvConfigError([f"constraints: site {site!r} is not in the model; sites: {', '.join(map(str, names))}"])
    data = mujoco.MjData(model)
    mujoco.mj_kinematics(model, data)
    return data.site_xpos[sid].copy()


@dataclass(frozen=True)
class StartDistribution:
    """Nominal pose (a keyframe ``pose``, an explicit ``qpos``/``qvel``, or the model's qpos0)
    plus noise, optionally constrained; ``max_tries`` candidates per requested state at most.
    """

    name: str
    description: str = ""
    pose: str | None = None
    qpos: tuple[float, ...] | None = None
    qvel: tuple[float, ...] | None = None
    qpos_noise: Noise | None = None
    qvel_noise: Noise | None = None
    constraints: tuple[Constraint, ...] = ()
    max_tries: int = 200
    source: str = field(default="", compare=False)

    def __post_init__(self) -> None:
        problems = []
        if not isinstance(self.name, str) or not self.name:
            problems.append(f"name must be a non-empty string, got {self.name!r}")
        if self.pose is not None and self.qpos is not None:
            problems.append("give either pose (a keyframe name) or qpos, not both")
        for label in ("qpos", "qvel"):
            vec = getattr(self, label)
            if vec is not None and not all(_finite(v) for v in vec):
                problems.append(f"{label} must be finite numbers, got {list(vec)}")
        if isinstance(self.max_tries, bool) or not isinstance(self.max_tries, int) or self.max_tries < 1:
            problems.append(f"max_tries must be an integer >= 1, got {self.max_tries!r}")
        if problems:
            where = self.source or f"start {self.name!r}"
            raise EnvConfigError([f"{where}: {p}" for p in problems])

    # -- sampling -----------------------------------------------------------
    def nominal(self, model: mujoco.MjModel) -> tuple[np.ndarray, np.ndarray]:
        """The nominal (qpos (nq,), qvel (nv,)) on this model."""
        if self.pose is not None:
            kid = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_KEY, self.pose)
            if kid < 0:
                keys = [mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_KEY, k) for k in range(model.nkey)]
                raise EnvConfigError(
                    [f"{self._where()}: nominal.pose: keyframe {self.pose!r} is not in the model; "
                     f"keyframes: {', '.join(map(str, keys)) or '(none)'}"]
                )
            qpos, qvel = model.key_qpos[kid].copy(), model.key_qvel[kid].copy()
        else:
            qpos, qvel = model.qpos0.copy(), np.zeros(model.nv)
        for label, vec, size in (("qpos", self.qpos, model.nq), ("qvel", self.qvel, model.nv)):
            if vec is None:
                continue
            if len(vec) != size:
                raise EnvConfigError(
                    [f"{self._where()}: nominal.{label}: has {len(vec)} entries, the model has {size}; "
                     f"give {size} numbers"]
                )
            if label == "qpos":
                qpos = np.asarray(vec, dtype=np.float64)
            else:
                qvel = np.asarray(vec, dtype=np.float64)
        return qpos, qvel

    def sample(
        self,
        model: mujoco.MjModel,
        rng: np.random.Generator,
        n: int,
        *,
        named_state: NamedStateFn | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """``n`` start states (qpos (n, nq), qvel (n, nv)); deterministic for the rng's state.

        Limited joints are clipped into their range and quaternions renormalised.
        With constraints, candidates are drawn in rounds and rejected until ``n``
        pass; after ``n * max_tries`` candidates it raises EnvConfigError with the
        acceptance rate seen and the constraint that rejected most.
        """
        if n < 1:
            raise ValueError(f"n must be >= 1, got {n}")
        if not self.constraints:
            return self._candidates(model, rng, n)
        needs = {c.quantity for c in self.constraints} - {"qpos", "qvel"}
        if needs and named_state is None:
            raise ValueError(
                f"start {self.name!r}: constraints on {sorted(needs)} need named_state=...; pass "
                f"envs.starts.forward_named_state(model, read) or the runtime's reader"
            )
        budget = n * self.max_tries
        kept_q, kept_v = [], []
        accepted = drawn = 0
        rejected_by = np.zeros(len(self.constraints), dtype=np.int64)
        while accepted < n and drawn < budget:
            m = min(max(2 * (n - accepted), 16), budget - drawn)
            qpos, qvel = self._candidates(model, rng, m)
            values = dict(named_state(qpos, qvel)) if needs else {}
            values.setdefault("qpos", qpos)
            values.setdefault("qvel", qvel)
            ok = np.ones(m, dtype=bool)
            for i, c in enumerate(self.constraints):
                if c.quantity not in values:
                    raise ValueError(
                        f"start {self.name!r}: constraint on unknown quantity {c.quantity!r}; "
                        f"known: {', '.join(sorted(values))}"
                    )
                passed = c.accept(np.asarray(values[c.quantity], dtype=np.float64), model)
                rejected_by[i] += int(np.sum(~passed))
                ok &= passed
            kept_q.append(qpos[ok])
            kept_v.append(qvel[ok])
            accepted += int(ok.sum())
            drawn += m
        if accepted < n:
            worst = int(np.argmax(rejected_by))
            raise EnvConfigError(
                [f"{self._where()}: constraints: only {accepted} of {drawn} candidates "
                 f"({accepted / drawn:.2%}) satisfied the constraints, {n} needed within max_tries="
                 f"{self.max_tries} per state; '{self.constraints[worst].describe()}' rejected "
                 f"{rejected_by[worst]}; narrow the noise, widen the constraint or raise max_tries"]
            )
        return np.concatenate(kept_q)[:n], np.concatenate(kept_v)[:n]

    def _candidates(self, model: mujoco.MjModel, rng: np.random.Generator, m: int) -> tuple[np.ndarray, np.ndarray]:
        q0, v0 = self.nominal(model)
        qpos = np.repeat(q0[None], m, axis=0)
        qvel = np.repeat(v0[None], m, axis=0)
        if self.qpos_noise is not None:
            qpos = qpos + self.qpos_noise.draw(rng, self.qpos_noise.per_coordinate(model, "qpos"), m)
        if self.qvel_noise is not None:
            qvel = qvel + self.qvel_noise.draw(rng, self.qvel_noise.per_coordinate(model, "qvel"), m)
        return _respect_joints(model, qpos), qvel

    def _where(self) -> str:
        return self.source or f"start {self.name}"


def _respect_joints(model: mujoco.MjModel, qpos: np.ndarray) -> np.ndarray:
    """Clip limited hinge/slide joints into range; renormalise ball/free quaternions."""
    for j in range(model.njnt):
        adr = int(model.jnt_qposadr[j])
        jtype = int(model.jnt_type[j])
        if jtype in (mujoco.mjtJoint.mjJNT_HINGE, mujoco.mjtJoint.mjJNT_SLIDE):
            if model.jnt_limited[j]:
                lo, hi = model.jnt_range[j]
                qpos[:, adr] = np.clip(qpos[:, adr], lo, hi)
        else:
            start = adr + (3 if jtype == mujoco.mjtJoint.mjJNT_FREE else 0)
            quat = qpos[:, start : start + 4]
            qpos[:, start : start + 4] = quat / np.linalg.norm(quat, axis=1, keepdims=True)
    return qpos


respect_joints = _respect_joints  # public name: other layers widen sampled states and keep them valid


def forward_named_state(
    model: mujoco.MjModel, read: Callable[[np.ndarray, np.ndarray, np.ndarray], Mapping[str, np.ndarray]]
) -> NamedStateFn:
    """A ``named_state(qpos, qvel)`` that puts each row on a scratch MjData as reset does
    (``mj_resetData``, write, ``mj_forward``) and calls ``read(qpos, qvel, sensordata)``.
    """
    data = mujoco.MjData(model)

    def named_state(qpos: np.ndarray, qvel: np.ndarray) -> Mapping[str, np.ndarray]:
        qpos, qvel = np.atleast_2d(qpos), np.atleast_2d(qvel)
        sensordata = np.empty((qpos.shape[0], model.nsensordata))
        for i in range(qpos.shape[0]):
            mujoco.mj_resetData(model, data)
            data.qpos[:] = qpos[i]
            data.qvel[:] = qvel[i]
            mujoco.mj_forward(model, data)
            sensordata[i] = data.sensordata
        return read(qpos, qvel, sensordata)

    return named_state


# ---------------------------------------------------------------------------
# YAML.

_TOP_KEYS = ("name", "description", "nominal", "noise", "constraints", "max_tries")
_NOMINAL_KEYS = ("pose", "qpos", "qvel")
_NOISE_KEYS = ("qpos", "qvel")
_NOISE_SPEC_KEYS = ("distribution", "scale")
_BALL_KEYS = ("quantity", "center", "radius")
_BOX_KEYS = ("quantity", "low", "high")


class _Problems:
    """Collects ``FILE:LINE: field: what; fix`` lines."""

    def __init__(self, source: str):
        self.source = source
        self.items: list[str] = []

    def add(self, line: int | None, fieldname: str, text: str) -> None:
        self.items.append(f"{self.source}:{line or 1}: {fieldname}: {text}")

    def unknown_keys(self, mapping: Mapping, valid: tuple[str, ...], prefix: str) -> None:
        import difflib

        for key in mapping:
            if key not in valid:
                close = difflib.get_close_matches(str(key), valid, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                self.add(_line(mapping, key), f"{prefix}{key}", f"unknown field; {hint}valid fields: {', '.join(valid)}")


def _line(mapping: Any, key: Any, default: int | None = None) -> int | None:
    return getattr(mapping, "lines", {}).get(key, default)


def _numbers(value: Any, p: _Problems, line: int | None, name: str) -> tuple[float, ...] | None:
    if not isinstance(value, list) or not value:
        p.add(line, name, f"must be a non-empty list of numbers, got {value!r}; write e.g. [0.0, 0.5]")
        return None
    if not all(_finite(v) for v in value):
        p.add(line, name, f"must contain finite numbers only, got {value!r}; write plain numbers")
        return None
    return tuple(float(v) for v in value)


def _parse_noise(value: Any, p: _Problems, line: int | None, name: str) -> Noise | None:
    if not isinstance(value, Mapping):
        p.add(line, name, f"must be a mapping with distribution and scale, got {value!r}; "
                          f"write {{distribution: uniform, scale: 0.02}}")
        return None
    p.unknown_keys(value, _NOISE_SPEC_KEYS, f"{name}.")
    dist = value.get("distribution", "uniform")
    ok = True
    if dist not in _DISTRIBUTIONS:
        p.add(_line(value, "distribution", line), f"{name}.distribution",
              f"must be one of {', '.join(_DISTRIBUTIONS)}, got {dist!r}; pick one")
        ok = False
    if "scale" not in value:
        p.add(line, f"{name}.scale", "missing; give the half-width (uniform) or std (gaussian)")
        return None
    raw = value["scale"]
    sline = _line(value, "scale", line)
    scale: Any
    if isinstance(raw, Mapping):
        bad = [k for k, v in raw.items() if not _finite(v) or v < 0]
        if bad:
            p.add(sline, f"{name}.scale", f"must map joint names to finite numbers >= 0, bad for {bad}; fix those")
            return None
        scale = tuple((str(k), float(v)) for k, v in raw.items())
    elif isinstance(raw, list):
        vec = _numbers(raw, p, sline, f"{name}.scale")
        if vec is None:
            return None
        if any(v < 0 for v in vec):
            p.add(sline, f"{name}.scale", f"must be >= 0, got {list(vec)}; noise scales are magnitudes")
            return None
        scale = vec
    elif _finite(raw):
        if raw < 0:
            p.add(sline, f"{name}.scale", f"must be >= 0, got {raw}; noise scales are magnitudes")
            return None
        scale = float(raw)
    else:
        p.add(sline, f"{name}.scale", f"must be a number, a list or a mapping joint: scale, got {raw!r}")
        return None
    return Noise(dist, scale) if ok else None


def _parse_constraint(item: Any, p: _Problems, line: int | None, index: int) -> Constraint | None:
    name = f"constraints[{index}]"
    if not isinstance(item, Mapping) or len(item) != 1 or next(iter(item)) not in ("ball", "box"):
        p.add(line, name, f"must be one mapping 'ball: {{...}}' or 'box: {{...}}', got {item!r}")
        return None
    kind = next(iter(item))
    body = item[kind]
    bline = _line(item, kind, line)
    if not isinstance(body, Mapping):
        p.add(bline, f"{name}.{kind}", f"must be a mapping, got {body!r}")
        return None
    valid = _BALL_KEYS if kind == "ball" else _BOX_KEYS
    p.unknown_keys(body, valid, f"{name}.{kind}.")
    missing = [k for k in valid if k not in body]
    if missing:
        p.add(bline, f"{name}.{kind}", f"missing {', '.join(missing)}; give all of {', '.join(valid)}")
        return None
    quantity = body["quantity"]
    if not isinstance(quantity, str) or not quantity.isidentifier():
        p.add(_line(body, "quantity", bline), f"{name}.{kind}.quantity",
              f"must be a named-state quantity such as fingertip, got {quantity!r}")
        return None
    if kind == "ball":
        center: Any = body["center"]
        cline = _line(body, "center", bline)
        if isinstance(center, Mapping) and set(center) == {"site"} and isinstance(center["site"], str):
            center = center["site"]
        else:
            center = _numbers(center, p, cline, f"{name}.ball.center")
            if center is None:
                return None
        radius = body["radius"]
        if not _finite(radius) or radius <= 0:
            p.add(_line(body, "radius", bline), f"{name}.ball.radius",
                  f"must be a finite number > 0 (m), got {radius!r}; e.g. 0.05")
            return None
        return BallConstraint(quantity, center, float(radius))
    low = _numbers(body["low"], p, _line(body, "low", bline), f"{name}.box.low")
    high = _numbers(body["high"], p, _line(body, "high", bline), f"{name}.box.high")
    if low is None or high is None:
        return None
    if len(low) != len(high):
        p.add(_line(body, "high", bline), f"{name}.box.high",
              f"has {len(high)} entries, low has {len(low)}; give the same length")
        return None
    if any(lo > hi for lo, hi in zip(low, high)):
        p.add(_line(body, "low", bline), f"{name}.box.low", f"must be <= high entrywise, got {list(low)} vs {list(high)}")
        return None
    return BoxConstraint(quantity, low, high)


def start_from_mapping(data: Any, *, source: str = "<mapping>") -> StartDistribution:
    """Validate a parsed mapping; raise EnvConfigError listing every problem."""
    p = _Problems(source)
    if not isinstance(data, Mapping):
        p.add(1, "start", f"must be a mapping of field: value, got {type(data).__name__}; start with 'name: ...'")
        raise EnvConfigError(p.items)
    p.unknown_keys(data, _TOP_KEYS, "")
    kwargs: dict[str, Any] = {}
    name = data.get("name")
    if not isinstance(name, str) or not name:
        p.add(_line(data, "name"), "name", f"must be a non-empty string, got {name!r}; e.g. arm_home")
    kwargs["name"] = name
    if "description" in data:
        if not isinstance(data["description"], str):
            p.add(_line(data, "description"), "description", "must be text; quote it")
        kwargs["description"] = data["description"]
    nominal = data.get("nominal", {})
    nline = _line(data, "nominal")
    if not isinstance(nominal, Mapping):
        p.add(nline, "nominal", f"must be a mapping with pose or qpos/qvel, got {nominal!r}")
        nominal = LinedDict()
    p.unknown_keys(nominal, _NOMINAL_KEYS, "nominal.")
    if "pose" in nominal and "qpos" in nominal:
        p.add(_line(nominal, "qpos", nline), "nominal.qpos", "conflicts with nominal.pose; give one of them")
    if "pose" in nominal:
        if not isinstance(nominal["pose"], str) or not nominal["pose"]:
            p.add(_line(nominal, "pose", nline), "nominal.pose",
                  f"must be a keyframe name such as home, got {nominal['pose']!r}")
        kwargs["pose"] = nominal["pose"]
    for key in ("qpos", "qvel"):
        if key in nominal:
            kwargs[key] = _numbers(nominal[key], p, _line(nominal, key, nline), f"nominal.{key}")
    noise = data.get("noise", {})
    if not isinstance(noise, Mapping):
        p.add(_line(data, "noise"), "noise", f"must be a mapping with qpos and/or qvel, got {noise!r}")
        noise = LinedDict()
    p.unknown_keys(noise, _NOISE_KEYS, "noise.")
    for key in _NOISE_KEYS:
        if key in noise:
            kwargs[f"{key}_noise"] = _parse_noise(noise[key], p, _line(noise, key, _line(data, "noise")), f"noise.{key}")
    constraints = data.get("constraints", [])
    cline = _line(data, "constraints")
    if not isinstance(constraints, list):
        p.add(cline, "constraints", f"must be a list of ball/box items, got {constraints!r}")
        constraints = []
    parsed = [_parse_constraint(c, p, _item_line(c, cline, i), i) for i, c in enumerate(constraints)]
    kwargs["constraints"] = tuple(c for c in parsed if c is not None)
    if "max_tries" in data:
        mt = data["max_tries"]
        if isinstance(mt, bool) or not isinstance(mt, int) or mt < 1:
            p.add(_line(data, "max_tries"), "max_tries", f"must be an integer >= 1, got {mt!r}; e.g. 200")
        kwargs["max_tries"] = mt
    if p.items:
        raise EnvConfigError(sort_problems(p.items))
    return StartDistribution(**kwargs, source=source)


def _item_line(item: Any, default: int | None, index: int) -> int | None:
    lines = getattr(item, "lines", None)
    if lines:
        return min(lines.values())
    return default


def load_start(path: str | Path) -> StartDistribution:
    """Read a start-distribution YAML file; every problem at once as EnvConfigError."""
    data, problems = read_yaml_with_lines(path)
    if data is None:
        raise EnvConfigError(problems)
    try:
        start = start_from_mapping(data, source=str(path))
    except EnvConfigError as exc:
        raise EnvConfigError(problems + exc.problems) from None
    if problems:
        raise EnvConfigError(problems)
    return start


def rig_named_state(rig: Any) -> NamedStateFn:
    """``named_state(qpos, qvel)`` for a rig: reset-and-forward each row, then ``read_state``."""
    return forward_named_state(rig.model, _reader_for(rig))


class RigStart:
    """A rig's ``start(model, rng, n)`` drawn from a StartDistribution.

    Constraints over named quantities need the rig's reader, and the rig is
    built after its start function, so ``bind(rig)`` completes it.
    """

    def __init__(self, dist: StartDistribution):
        self.dist = dist
        self._rig: Any = None

    def bind(self, rig: Any) -> Any:
        self._rig = rig
        return rig

    def __call__(self, model: mujoco.MjModel, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        reader = None
        if self.dist.constraints:
            if self._rig is None:
                raise RuntimeError(f"start {self.dist.name!r} has constraints but was never bound to a rig; call bind(rig)")
            reader = forward_named_state(model, _reader_for(self._rig))
        return self.dist.sample(model, rng, n, named_state=reader)


def _reader_for(rig: Any):
    from .rig import read_state

    return lambda q, v, s: read_state(rig, qpos=q, qvel=v, sensordata=s)
