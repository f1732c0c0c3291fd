"""Sweep files (our own YAML format) and command-line axes, read into a ``SweepSpec``.

```yaml
name: arm-reach-payload-gain
skill: arm-reach-tray            # or chain: ../chains/arm-lift-reach-place.yaml (relative to this file)
task: {initial_states: ../initial_states/arm_clearance.yaml}   # skills only; optional variant: FILE
axes:                            # grid: a list per axis; random cells: {low, high} per axis plus samples: N
  payload_mass: [0.2, 0.6, 1.0]
  actuator_gain: [0.6, 0.8, 1.0]
episodes: 200                    # per cell
require: {success: 0.9}          # default: a chain's require.chain, else 0.95
correction: holm                 # or bonferroni
```

Every problem is reported at once as ``FILE:LINE: field: what; fix`` (exit 2).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from ..errors import InvalidInputError, Problem
from ..checker.chain import DISTURBANCE_FIELDS, disturbances_from_yaml
from ..yaml_source import YamlDocument, field_lines, load_yaml_file, unknown_keys
from .spec import Axis, SweepSpec

__all__ = ["SWEEP_FIELDS", "load_sweep", "sweep_from_document", "parse_axis_option", "is_sweep_file"]

SWEEP_FIELDS = ("name", "description", "skill", "chain", "task", "axes", "samples", "episodes", "seed", "require",
                "confidence", "correction", "disturbances")
_TASK_FIELDS = ("variant", "initial_states")


def is_sweep_file(path: str | Path) -> bool:
    """A YAML file with a top-level ``axes:`` key (a chain file has ``skills:`` instead)."""
    doc = load_yaml_file(path)
    return isinstance(doc.data, Mapping) and "axes" in doc.data


def _mapping(doc: YamlDocument, data: Mapping[str, Any], key: str, known: tuple[str, ...] | None, problems: list[Problem]) -> dict[str, Any]:
    raw = data.get(key)
    if raw is None:
        return {}
    if not isinstance(raw, Mapping):
        problems.append(doc.problem((key,), f"must be a mapping, got {raw!r}", f"write e.g. {key}: {{...}}"))
        return {}
    if known is not None:
        problems.extend(unknown_keys(doc, raw, (key,), known))
    return dict(raw)


def _file(doc: YamlDocument, base: Path, raw: Any, where: tuple, problems: list[Problem]) -> Path | None:
    if raw is None:
        return None
    if not isinstance(raw, str) or not raw.strip():
        problems.append(doc.problem(where, f"must be a path to a file, got {raw!r}", "write a path relative to the sweep file"))
        return None
    path = Path(raw).expanduser()
    path = path if path.is_absolute() else (base / path).resolve()
    if not path.is_file():
        problems.append(doc.problem(where, f"file {raw!r} not found (looked at {path})", "give a path relative to the sweep file"))
        return None
    return path


def _axes(doc: YamlDocument, raw: Any, problems: list[Problem]) -> tuple[Axis, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, Mapping):
        problems.append(doc.problem(("axes",), f"must map axis names to values, got {raw!r}", "write axes: {payload_mass: [0.2, 1.0]}"))
        return ()
    axes = []
    for name, value in raw.items():
        if isinstance(value, list):
            axes.append(Axis(str(name), tuple(value)))
        elif isinstance(value, Mapping):
            problems.extend(unknown_keys(doc, value, ("axes", name), ("low", "high")))
            axes.append(Axis(str(name), (), value.get("low"), value.get("high")))
        else:
            problems.append(doc.problem(("axes", name), f"must be a list of values or {{low, high}}, got {value!r}", "write e.g. [0.2, 0.6, 1.0]"))
    return tuple(axes)


def sweep_from_document(doc: YamlDocument, *, base: Path) -> SweepSpec:
    """Validate a parsed sweep document; raise InvalidInputError listing every problem."""
    data = doc.data
    if not isinstance(data, Mapping):
        raise InvalidInputError([doc.problem((), f"a sweep file must be a mapping, got {type(data).__name__}", "start with 'name: <name>'")])
    problems = unknown_keys(doc, data, (), SWEEP_FIELDS)
    task = _mapping(doc, data, "task", _TASK_FIELDS, problems)
    require = _mapping(doc, data, "require", ("success",), problems)
    skill = data.get("skill")
    if skill is not None and (not isinstance(skill, str) or not skill.strip()):
        problems.append(doc.problem(("skill",), f"must be a skill name, name@N or a spec file, got {skill!r}", "write e.g. skill: arm-reach-tray"))
        skill = None
    elif isinstance(skill, str) and skill.endswith((".yaml", ".yml")):
        skill = str(_file(doc, base, skill, ("skill",), problems) or skill)
    chain = _file(doc, base, data.get("chain"), ("chain",), problems)
    if data.get("chain") is not None and chain is None:
        chain = Path("<missing>")
    fields = dict(
        name=data.get("name", Path(doc.source).stem), description=data.get("description") or "", skill=skill, chain=chain,
        variant=_file(doc, base, task.get("variant"), ("task", "variant"), problems),
        initial_states=_file(doc, base, task.get("initial_states"), ("task", "initial_states"), problems),
        axes=_axes(doc, data.get("axes"), problems), samples=data.get("samples"), episodes=data.get("episodes", 200),
        seed=data.get("seed", 0), require=require.get("success"), confidence=data.get("confidence", 0.95),
        correction=data.get("correction", "holm"),
        disturbances=disturbances_from_yaml(doc, _mapping(doc, data, "disturbances", DISTURBANCE_FIELDS, problems), problems),
        source=doc.source, lines=field_lines(doc),
    )
    try:
        spec = SweepSpec(**fields)
    except InvalidInputError as exc:
        problems += [p for p in exc.problems if p not in problems]
        spec = None
    if problems:
        raise InvalidInputError(sorted(set(problems), key=lambda p: (p.line or 0, p.field, p.message)))
    return spec


def load_sweep(path: str | Path) -> SweepSpec:
    """Read and validate a sweep file."""
    path = Path(path)
    return sweep_from_document(load_yaml_file(path), base=path.resolve().parent)


def _number(text: str, option: str) -> float:
    try:
        return float(text) if any(c in text for c in ".eE") else int(text)
    except ValueError:
        raise InvalidInputError([Problem("<command line>", None, option, f"{text!r} is not a number", "write e.g. --axis payload_mass=0.2,0.6,1.0")]) from None


def parse_axis_option(text: str) -> Axis:
    """``NAME=V1,V2,...`` (grid values) or ``NAME=LOW:HIGH`` (a range for random cells)."""
    name, sep, values = text.partition("=")
    if not sep or not name.strip() or not values.strip():
        raise InvalidInputError([Problem("<command line>", None, "--axis", f"must be NAME=V1,V2,... or NAME=LOW:HIGH, got {text!r}", "write e.g. --axis payload_mass=0.2,0.6,1.0")])
    name = name.strip()
    if ":" in values:
        low, _, high = values.partition(":")
        return Axis(name, (), _number(low.strip(), "--axis"), _number(high.strip(), "--axis"))
    return Axis(name, tuple(_number(v.strip(), "--axis") for v in values.split(",")))
