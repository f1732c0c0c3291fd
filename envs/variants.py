"""Task variants: changed physics or task parameters, as validated data applied to an MjSpec.

A variant (payload mass, damping, friction, gravity, motor gain, target,
floor slope, time step, commanded speed) is a frozen value object loaded from
YAML. Each field registers an applier with ``@variant_field``; ``apply_variant``
runs them on a ``mujoco.MjSpec`` before compile, so a variant never touches a
compiled model. ``VariantTargets`` says which parts of a robot a field acts on.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

import mujoco
import numpy as np
import yaml

from .errors import EnvConfigError
from .yaml_limits import YamlTooLarge, compose_within_limits

__all__ = [
    "TaskVariant",
    "VariantTargets",
    "VariantField",
    "NOMINAL",
    "variant_field",
    "variant_fields",
    "load_variant",
    "variant_from_mapping",
    "resolve_variant",
    "variant_digest",
    "apply_variant",
    "read_yaml_with_lines",
    "sort_problems",
    "LinedDict",
]


# ---------------------------------------------------------------------------
# YAML with line numbers (shared with envs.starts)


class LinedDict(dict):
    """A YAML mapping that remembers the line (1-based) of each key."""

    lines: dict[Any, int]
    duplicates: list[tuple[Any, int]]


class _LineLoader(yaml.SafeLoader):
    """SafeLoader whose mappings are ``LinedDict``: safe types only, plus key lines."""


def _construct_lined_map(loader: _LineLoader, node: yaml.MappingNode):
    loader.flatten_mapping(node)
    data = LinedDict()
    data.lines, data.duplicates = {}, []
    yield data
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=True)
        try:
            hash(key)
        except TypeError:
            raise yaml.constructor.ConstructorError(
                "while constructing a mapping", node.start_mark, "found an unhashable key", key_node.start_mark
            ) from None
        line = key_node.start_mark.line + 1
        if key in data:
            data.duplicates.append((key, line))
        data[key] = loader.construct_object(value_node, deep=True)
        data.lines[key] = line


_LineLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_lined_map)


def read_yaml_with_lines(path: str | Path) -> tuple[Any, list[str]]:
    """Parse a YAML file safely; return (data, problems) with ``FILE:LINE:`` problems.

    Mappings in ``data`` are ``LinedDict`` (``.lines[key]`` is the key's line).
    A file that cannot be read or parsed gives ``(None, [problem])``.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        return None, [f"{path}:1: file: cannot be read ({exc.strerror or exc}); check the path"]
    try:
        loader, node = compose_within_limits(text, _LineLoader)  # safe: a SafeLoader subclass, no arbitrary objects
        try:
            data = None if node is None else loader.construct_document(node)
        finally:
            loader.dispose()
    except YamlTooLarge as exc:
        return None, [f"{path}:{exc.line or 1}: yaml: {exc}"]
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
        line = mark.line + 1 if mark is not None else 1
        what = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        return None, [f"{path}:{line}: yaml: {what}; fix the YAML syntax"]
    problems = []
    for key, line in _all_duplicates(data):
        problems.append(f"{path}:{line}: {key}: appears twice in the same mapping; keep one")
    return data, problems


def sort_problems(problems: list[str]) -> list[str]:
    """Order ``FILE:LINE: ...`` problems by line (stable), so they read top to bottom."""

    def line(p: str) -> int:
        m = re.match(r"^.*?:(\d+): ", p)
        return int(m.group(1)) if m else 0

    return sorted(problems, key=line)


def _all_duplicates(data: Any):
    if isinstance(data, LinedDict):
        yield from data.duplicates
        for value in data.values():
            yield from _all_duplicates(value)
    elif isinstance(data, list):
        for item in data:
            yield from _all_duplicates(item)


# ---------------------------------------------------------------------------
# Field value checks: return the normalised value or raise _Bad(what; fix).


class _Bad(ValueError):
    """A field value is invalid; the message is 'what is wrong; fix'."""


def _number(value: Any, unit: str) -> float:
    in_unit = f" in {unit}" if unit else ""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise _Bad(f"must be a number{in_unit}, got {value!r} ({type(value).__name__}); write a plain number")
    x = float(value)
    if not math.isfinite(x):
        raise _Bad(f"must be a finite number{in_unit}, got {value!r}; write a finite value")
    return x


def _vector(value: Any, unit: str, length: int) -> tuple[float, ...]:
    if not isinstance(value, (list, tuple)):
        raise _Bad(f"must be a list of {length} numbers in {unit}, got {value!r}; write e.g. [0, 0, -9.81]")
    if len(value) != length:
        raise _Bad(f"must have {length} entries (x, y, z), got {len(value)}; give exactly {length} numbers")
    return tuple(_number(v, unit) for v in value)


def _positive(unit: str, example: str) -> Callable[[Any], float]:
    def check(value: Any) -> float:
        x = _number(value, unit)
        if x <= 0:
            raise _Bad(f"must be > 0{' ' + unit if unit else ''}, got {x:g}; give a positive value, e.g. {example}")
        return x

    return check


def _nonnegative(unit: str, example: str) -> Callable[[Any], float]:
    def check(value: Any) -> float:
        x = _number(value, unit)
        if x < 0:
            raise _Bad(f"must be >= 0{' ' + unit if unit else ''}, got {x:g}; give a non-negative value, e.g. {example}")
        return x

    return check


def _check_damping(value: Any) -> float | tuple[float, ...]:
    one = _nonnegative("N m s/rad", "0.5")
    if isinstance(value, (list, tuple)):
        if not value:
            raise _Bad("must be a number or a non-empty list (one per joint), got []; give one value per joint")
        return tuple(one(v) for v in value)
    return one(value)


def _check_vector3(unit: str) -> Callable[[Any], tuple[float, ...]]:
    return lambda value: _vector(value, unit, 3)


def _check_slope(value: Any) -> float:
    x = _number(value, "degrees")
    if not -90.0 < x < 90.0:
        raise _Bad(f"must lie strictly between -90 and 90 degrees, got {x:g}; a floor at 90 degrees is a wall")
    return x


def _check_timestep(value: Any) -> float:
    x = _positive("s", "0.002")(value)
    # Common practice: MuJoCo models of this size need steps of a few ms at most.
    if x > 0.05:
        raise _Bad(f"must be <= 0.05 s, got {x:g}; MuJoCo steps this long are unstable, use e.g. 0.002")
    return x


def _check_speed(value: Any) -> float:
    return _number(value, "m/s")


# ---------------------------------------------------------------------------
# What a field acts on, and the registry of fields.


@dataclass(frozen=True)
class VariantTargets:
    """Which parts of one robot the variant fields act on (names in its MJCF).

    ``damped_joints`` lists the joints ``joint_damping`` sets, in the order a
    per-joint list is given; ``actuators`` lists the motors ``actuator_gain``
    scales (None: all). ``task_fields`` names fields the task itself reads
    (such as ``speed_command``) rather than the model.
    """

    robot: str
    payload_body: str | None = None
    floor_geom: str | None = None
    foot_geoms: tuple[str, ...] = ()
    target_site: str | None = None
    damped_joints: tuple[str, ...] = ()
    actuators: tuple[str, ...] | None = None
    task_fields: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not self.robot:
            raise ValueError("VariantTargets.robot must name the robot, got ''")
        for label in ("foot_geoms", "damped_joints", "task_fields"):
            if isinstance(getattr(self, label), str):
                raise ValueError(f"VariantTargets.{label} must be a tuple of names, got a string")


Applier = Callable[[mujoco.MjSpec, Any, VariantTargets], None]
# Returns None when the field applies to the robot, else the reason it does not.
Applicable = Callable[[Any, VariantTargets], str | None]


@dataclass(frozen=True)
class VariantField:
    """One variant field: its unit and meaning, value check, applicability and applier."""

    name: str
    unit: str
    meaning: str
    check: Callable[[Any], Any]
    applicable: Applicable
    apply: Applier


_FIELDS: dict[str, VariantField] = {}


def variant_field(
    name: str, *, unit: str, meaning: str, check: Callable[[Any], Any], applicable: Applicable
) -> Callable[[Applier], Applier]:
    """Decorator: register ``apply(spec, value, targets)`` as the applier of field ``name``."""

    def wrap(apply: Applier) -> Applier:
        if name in _FIELDS:
            raise ValueError(f"variant field {name!r} is already registered")
        _FIELDS[name] = VariantField(name, unit, meaning, check, applicable, apply)
        return apply

    return wrap


def variant_fields() -> dict[str, VariantField]:
    """Every registered field, in registration (= application) order."""
    return dict(_FIELDS)


# ---------------------------------------------------------------------------
# The value object.

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]*$")
_META_KEYS = ("name", "description")


@dataclass(frozen=True)
class TaskVariant:
    """A changed task, as data. Unset fields (None) leave the nominal model alone.

    ``source`` records the file it came from (not part of equality or digest).
    """

    name: str
    description: str = ""
    payload_mass: float | None = None  # kg
    joint_damping: float | tuple[float, ...] | None = None  # N m s/rad, one or per joint
    friction: float | None = None  # sliding friction coefficient of floor and feet
    gravity: tuple[float, float, float] | None = None  # m/s^2
    actuator_gain: float | None = None  # factor on motor gear
    target_position: tuple[float, float, float] | None = None  # m, the target site
    floor_slope: float | None = None  # degrees about y; positive rises toward +x
    timestep: float | None = None  # s, physics step
    speed_command: float | None = None  # m/s, commanded forward speed
    source: str = field(default="", compare=False)

    def __post_init__(self) -> None:
        problems = []
        if not isinstance(self.name, str) or not _NAME_RE.match(self.name):
            problems.append(
                f"name: must be letters, digits, '_', '.' or '-' (starting with a letter or digit), "
                f"got {self.name!r}; e.g. heavy_payload"
            )
        if not isinstance(self.description, str):
            problems.append(f"description: must be text, got {type(self.description).__name__}")
        for fname, spec in _FIELDS.items():
            value = getattr(self, fname)
            if value is None:
                continue
            try:
                object.__setattr__(self, fname, spec.check(value))
            except _Bad as exc:
                problems.append(f"{fname}: {exc}")
        if problems:
            where = f"{self.source}: " if self.source else f"variant {self.name!r}: "
            raise EnvConfigError([where + p for p in problems])

    def fields_set(self) -> dict[str, Any]:
        """The fields this variant changes: name -> normalised value."""
        return {n: getattr(self, n) for n in _FIELDS if getattr(self, n) is not None}

    @property
    def digest(self) -> str:
        return variant_digest(self)


NOMINAL = TaskVariant(name="nominal", description="the robot and task as modelled, nothing changed")


def variant_digest(variant: TaskVariant) -> str:
    """sha256 hex digest of the variant's canonical form (name and set fields, sorted JSON).

    The description and source file are prose and location, not task, so they
    are left out.
    """

    def plain(v: Any) -> Any:
        return list(v) if isinstance(v, tuple) else v

    canonical = {"name": variant.name, "fields": {k: plain(v) for k, v in variant.fields_set().items()}}
    text = json.dumps(canonical, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# ---------------------------------------------------------------------------
# Loading.


def _valid_keys() -> list[str]:
    return [*_META_KEYS, *_FIELDS]


def variant_from_mapping(
    data: Mapping[str, Any], *, source: str = "<mapping>", lines: Mapping[str, int] | None = None
) -> TaskVariant:
    """Validate a mapping (e.g. parsed YAML or a dict kwarg); raise EnvConfigError listing every problem."""
    if lines is None:
        lines = getattr(data, "lines", {})

    def where(key: str | None) -> str:
        line = lines.get(key) if key is not None else None
        return f"{source}:{line}" if line else (f"{source}:1" if source.endswith((".yaml", ".yml")) else source)

    if not isinstance(data, Mapping):
        raise EnvConfigError(
            [f"{where(None)}: variant: must be a mapping of field: value, got {type(data).__name__}; "
             f"start the file with 'name: <variant name>'"]
        )
    problems: list[str] = []
    valid = _valid_keys()
    values: dict[str, Any] = {}
    for key, value in data.items():
        if key not in valid:
            close = difflib.get_close_matches(str(key), valid, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            problems.append(f"{where(key)}: {key}: unknown field; {hint}valid fields: {', '.join(valid)}")
            continue
        if key == "name":
            if not isinstance(value, str) or not _NAME_RE.match(value):
                problems.append(
                    f"{where(key)}: name: must be letters, digits, '_', '.' or '-', got {value!r}; e.g. heavy_payload"
                )
        elif key == "description":
            if not isinstance(value, str):
                problems.append(f"{where(key)}: description: must be text, got {type(value).__name__}; quote it")
        elif value is None:
            problems.append(f"{where(key)}: {key}: has no value; give a value or remove the line")
            continue
        else:
            try:
                value = _FIELDS[key].check(value)
            except _Bad as exc:
                problems.append(f"{where(key)}: {key}: {exc}")
        values[key] = value
    if "name" not in data:
        problems.append(f"{where(None)}: name: missing; add a line 'name: <variant name>'")
    if problems:
        raise EnvConfigError(sort_problems(problems))
    return TaskVariant(**values, source=source)


def load_variant(path: str | Path) -> TaskVariant:
    """Read a variant YAML file; every problem at once as EnvConfigError (``FILE:LINE: field: ...``)."""
    data, problems = read_yaml_with_lines(path)
    if data is None:
        raise EnvConfigError(problems)
    try:
        variant = variant_from_mapping(data, source=str(path))
    except EnvConfigError as exc:
        raise EnvConfigError(problems + exc.problems) from None
    if problems:
        raise EnvConfigError(problems)
    return variant


def resolve_variant(variant: TaskVariant | Mapping[str, Any] | str | Path | None) -> TaskVariant:
    """A TaskVariant from None (nominal), a YAML path, a mapping, or a TaskVariant."""
    if variant is None:
        return NOMINAL
    if isinstance(variant, TaskVariant):
        return variant
    if isinstance(variant, (str, Path)):
        return load_variant(variant)
    if isinstance(variant, Mapping):
        return variant_from_mapping(variant, source="<variant dict>")
    raise TypeError(
        f"variant must be None, a YAML path, a mapping or a TaskVariant, got {type(variant).__name__}"
    )


# ---------------------------------------------------------------------------
# Applying.


def apply_variant(spec: mujoco.MjSpec, variant: TaskVariant, targets: VariantTargets) -> None:
    """Edit ``spec`` in place for every field the variant sets, in registry order.

    A field that does not apply to this robot is an error (all such fields are
    reported at once) and nothing is changed. Deterministic: same inputs, same spec.
    """
    where = variant.source or f"variant {variant.name}"
    problems = []
    chosen = variant.fields_set()
    for name, value in chosen.items():
        reason = _FIELDS[name].applicable(value, targets)
        if reason is not None:
            problems.append(f"{where}: {name}: does not apply to robot {targets.robot} ({reason}); {_fix(name)}")
    if problems:
        raise EnvConfigError(problems)
    for name, value in chosen.items():
        _FIELDS[name].apply(spec, value, targets)


def _fix(name: str) -> str:
    return f"remove '{name}' or use a variant made for this robot"


def _needs(attr: str, what: str) -> Applicable:
    def applicable(value: Any, t: VariantTargets) -> str | None:
        return None if getattr(t, attr) else f"it has no {what}"

    return applicable


def _always(value: Any, t: VariantTargets) -> str | None:
    return None


@variant_field(
    "payload_mass",
    unit="kg",
    meaning="mass of the carried payload; its inertia scales with it",
    check=_positive("kg", "1.0"),
    applicable=_needs("payload_body", "payload body"),
)
def _apply_payload_mass(spec: mujoco.MjSpec, mass: float, t: VariantTargets) -> None:
    body = spec.body(t.payload_body)
    if body is None or not body.explicitinertial or body.mass <= 0:
        raise EnvConfigError(
            [f"payload body {t.payload_body!r} of {t.robot} must exist with an explicit <inertial> of "
             f"positive mass; declare one in the MJCF"]
        )
    # Same shape and density distribution: inertia scales linearly with mass.
    body.inertia = np.asarray(body.inertia) * (mass / body.mass)
    body.mass = mass


def _damping_applicable(value: Any, t: VariantTargets) -> str | None:
    if not t.damped_joints:
        return "it has no damped joints declared"
    if isinstance(value, tuple) and len(value) != len(t.damped_joints):
        return (
            f"it has {len(t.damped_joints)} damped joints ({', '.join(t.damped_joints)}), "
            f"the list has {len(value)} entries; give one value or {len(t.damped_joints)}"
        )
    return None


@variant_field(
    "joint_damping",
    unit="N m s/rad",
    meaning="viscous damping of the robot's actuated joints (replaces the nominal value)",
    check=_check_damping,
    applicable=_damping_applicable,
)
def _apply_joint_damping(spec: mujoco.MjSpec, value: float | tuple[float, ...], t: VariantTargets) -> None:
    per_joint = value if isinstance(value, tuple) else (value,) * len(t.damped_joints)
    for name, d in zip(t.damped_joints, per_joint):
        spec.joint(name).damping[0] = d  # entry 0 is the linear coefficient


def _friction_applicable(value: Any, t: VariantTargets) -> str | None:
    return None if (t.floor_geom or t.foot_geoms) else "it has no floor or foot geoms"


@variant_field(
    "friction",
    unit="1",
    meaning="sliding friction coefficient of the floor and the feet",
    check=_nonnegative("", "0.3"),
    applicable=_friction_applicable,
)
def _apply_friction(spec: mujoco.MjSpec, mu: float, t: VariantTargets) -> None:
    # MuJoCo combines two geoms' friction by the maximum, so floor and feet both change.
    names = ((t.floor_geom,) if t.floor_geom else ()) + tuple(t.foot_geoms)
    for name in names:
        spec.geom(name).friction[0] = mu


@variant_field(
    "gravity",
    unit="m/s^2",
    meaning="gravitational acceleration vector (x, y, z)",
    check=_check_vector3("m/s^2"),
    applicable=_always,
)
def _apply_gravity(spec: mujoco.MjSpec, g: tuple[float, ...], t: VariantTargets) -> None:
    spec.option.gravity = np.asarray(g, dtype=np.float64)


def _gain_applicable(value: Any, t: VariantTargets) -> str | None:
    return None if t.actuators is None or t.actuators else "it has no motors declared"


@variant_field(
    "actuator_gain",
    unit="1",
    meaning="factor on every motor's gear: joint torque = factor x command",
    check=_positive("", "0.6"),
    applicable=_gain_applicable,
)
def _apply_actuator_gain(spec: mujoco.MjSpec, k: float, t: VariantTargets) -> None:
    actuators = spec.actuators if t.actuators is None else [spec.actuator(n) for n in t.actuators]
    for act in actuators:
        act.gear = np.asarray(act.gear) * k


@variant_field(
    "target_position",
    unit="m",
    meaning="position of the target site (x, y, z) in its parent frame (the world for a fixed target)",
    check=_check_vector3("m"),
    applicable=_needs("target_site", "target site"),
)
def _apply_target_position(spec: mujoco.MjSpec, pos: tuple[float, ...], t: VariantTargets) -> None:
    spec.site(t.target_site).pos = np.asarray(pos, dtype=np.float64)


@variant_field(
    "floor_slope",
    unit="degrees",
    meaning="tilt of the floor about y; positive makes the floor rise toward +x (uphill forward)",
    check=_check_slope,
    applicable=_needs("floor_geom", "floor geom"),
)
def _apply_floor_slope(spec: mujoco.MjSpec, degrees: float, t: VariantTargets) -> None:
    geom = spec.geom(t.floor_geom)
    # Rotation by -theta about +y turns the normal (0,0,1) into (-sin, 0, cos): z = tan(theta) x.
    half = -math.radians(degrees) / 2.0
    tilt = np.array([math.cos(half), 0.0, math.sin(half), 0.0])
    out = np.zeros(4)
    mujoco.mju_mulQuat(out, tilt, np.asarray(geom.quat, dtype=np.float64))
    geom.quat = out


@variant_field(
    "timestep",
    unit="s",
    meaning="physics time step (an env step is frame_skip of them)",
    check=_check_timestep,
    applicable=_always,
)
def _apply_timestep(spec: mujoco.MjSpec, dt: float, t: VariantTargets) -> None:
    spec.option.timestep = dt


def _speed_applicable(value: Any, t: VariantTargets) -> str | None:
    return None if "speed_command" in t.task_fields else "its task has no commanded speed"


@variant_field(
    "speed_command",
    unit="m/s",
    meaning="commanded forward speed of the task (read by the task's reward, not the model)",
    check=_check_speed,
    applicable=_speed_applicable,
)
def _apply_speed_command(spec: mujoco.MjSpec, v: float, t: VariantTargets) -> None:
    """Nothing to edit in the model: the rig builder reads variant.speed_command."""

