"""Read a skill spec from YAML and validate it: schema first, then semantics.

Every problem of a file is reported at once, each as
``FILE:LINE: field.path: what is wrong; how to fix it``. Semantic checks
need the env's named state and the controller kinds, so they import the
envs and torch lazily (``list``/``show`` never come here).
"""

from __future__ import annotations

import difflib
import json
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InvalidInputError, InvalidSpecError, Problem
from .spec import Skill, controller_from_document, skill_from_document
from .renamed_keys import SPEC_RENAMES, rename_document
from .yaml_source import YamlDocument, load_yaml_file, load_yaml_text

__all__ = ["load_spec", "parse_spec_text", "spec_schema", "validate_document", "check_semantics"]

_FIX_BY_FIELD = {
    "name": "use lowercase letters, digits, '-' or '_', e.g. arm-reach-tray",
    "max_steps": "give a whole number of env steps, e.g. 200",
    "env": "name a registered env, e.g. kinetome/BenchArm-v0",
    "starts_when": "write a predicate over named state, e.g. norm(qvel) < 0.5",
    "stops_when": "write a predicate over named state, e.g. norm(fingertip - target) < 0.02",
}


@lru_cache(maxsize=1)
def spec_schema() -> dict[str, Any]:
    """The JSON Schema shipped inside the package."""
    text = resources.files("kinetome.library").joinpath("spec_schema.json").read_text(encoding="utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _validator() -> Any:
    import jsonschema

    return jsonschema.Draft202012Validator(spec_schema())


def _schema_at(schema: dict[str, Any], path: list[Any]) -> dict[str, Any]:
    """Follow ``properties`` along a data path (enough for our flat schema)."""
    node = schema
    for part in path:
        props = node.get("properties", {})
        if part in props:
            node = props[part]
        elif isinstance(node.get("additionalProperties"), dict):
            node = node["additionalProperties"]
        else:
            return {}
    return node


def _schema_problems(doc: YamlDocument) -> list[Problem]:
    schema = spec_schema()
    validator = _validator()
    problems: list[Problem] = []
    for error in sorted(validator.iter_errors(doc.data), key=lambda e: (doc.line(tuple(e.absolute_path)) or 0, str(e.message))):
        path = tuple(error.absolute_path)
        field = path[-1] if path else ""
        if error.validator == "additionalProperties":
            known = sorted(_schema_at(schema, list(path)).get("properties", {}))
            for key in sorted(set(error.instance) - set(known)):
                close = difflib.get_close_matches(str(key), known, n=1)
                fix = f"did you mean '{close[0]}'?" if close else ""
                fix = (fix + " " if fix else "") + f"valid fields: {', '.join(known)}"
                problems.append(doc.problem((*path, key), f"unknown field '{key}'", fix))
        elif error.validator == "required":
            missing = error.message.split("'")[1] if "'" in error.message else error.message
            problems.append(doc.problem(path, f"missing required field '{missing}'", _FIX_BY_FIELD.get(missing, f"add '{missing}'")))
        elif error.validator == "enum":
            choices = ", ".join(map(str, error.validator_value))
            close = difflib.get_close_matches(str(error.instance), [str(o) for o in error.validator_value], n=1)
            fix = (f"did you mean '{close[0]}'? " if close else "") + f"use one of: {choices}"
            problems.append(doc.problem(path, f"must be one of the known values, got {error.instance!r}", fix))
        elif error.validator == "oneOf":
            problems.append(doc.problem(path, _positive_numbers_message(error.instance), "write e.g. 0.5 or [0.5, 0.5, 0.5]"))
        elif error.validator == "type":
            problems.append(doc.problem(path, f"must be of type {error.validator_value}, got {error.instance!r}", _FIX_BY_FIELD.get(str(field), "")))
        elif error.validator == "pattern":
            problems.append(doc.problem(path, f"has an invalid form {error.instance!r}", _FIX_BY_FIELD.get(str(field), f"must match {error.validator_value}")))
        elif error.validator in _BOUND_WORDS:
            problems.append(doc.problem(path, f"must be {_BOUND_WORDS[error.validator]} {error.validator_value}, got {error.instance!r}", _FIX_BY_FIELD.get(str(field), "")))
        elif error.validator in ("minLength", "maxLength", "minItems", "maxItems", "uniqueItems"):
            problems.append(doc.problem(path, f"{error.message}", _FIX_BY_FIELD.get(str(field), "")))
        else:
            problems.append(doc.problem(path, error.message))
    return problems


_BOUND_WORDS = {"minimum": ">=", "exclusiveMinimum": ">", "maximum": "<=", "exclusiveMaximum": "<"}


def _positive_numbers_message(value: Any) -> str:
    """Why a value is not a positive number or a non-empty list of them (the exploration std)."""
    def is_number(v: Any) -> bool:
        return isinstance(v, (int, float)) and not isinstance(v, bool)

    if is_number(value):
        return f"must be > 0, got {value!r}"
    if isinstance(value, list) and value and all(is_number(v) for v in value):
        i = next(i for i, v in enumerate(value) if v <= 0)
        return f"must be > 0 at element {i}, got {value[i]!r}"
    return f"must be a number or a list of numbers, got {value!r}"


def _skill_from_data(doc: YamlDocument, initial_states: Any = None) -> tuple[Skill | None, list[Problem]]:
    data = dict(doc.data)
    data.pop("initial_states", None)
    if initial_states is not None:
        data["initial_states"] = initial_states
    try:
        return skill_from_document(data), []
    except (TypeError, ValueError) as exc:
        return None, [doc.problem(("controller",), str(exc))]


def _path_from_message(message: str) -> tuple[str | int, ...]:
    """A dotted field such as ``controller.parameters.kp`` (maybe ``[1]``) as a path."""
    head = message.split(" ", 1)[0].rstrip(":")
    if not head.startswith("controller"):
        return ("controller",)
    path: list[str | int] = []
    for part in head.split("."):
        name, _, rest = part.partition("[")
        path.append(name)
        if rest.rstrip("]").isdigit():
            path.append(int(rest.rstrip("]")))
    return tuple(path)


def _controller_problems(doc: YamlDocument, problems: list[Problem], exc: Exception) -> None:
    for p in getattr(exc, "problems", None) or [Problem("", None, "controller", str(exc))]:
        if isinstance(p, Problem):
            problems.append(doc.problem(tuple(_path_from_message(p.field + " ")), p.message, p.fix))
        else:
            problems.append(doc.problem(("controller",), str(p)))


def _parameter_shapes(controller_data: Any, rig: Any, doc: YamlDocument, problems: list[Problem]) -> dict[str, tuple[int, ...]] | None:
    """Shapes of the controller's parameters, or None when the controller block is unusable."""
    from .controllers import context_from_rig, kind_declaration, plan_controller

    context = context_from_rig(rig)
    try:
        spec = controller_from_document(controller_data)
        plan = plan_controller(spec.kind, context, **spec.build_arguments())
    except (ValueError, KeyError, TypeError) as exc:
        _controller_problems(doc, problems, exc)
        try:  # still name the kind's parameters so the predicates can be checked too
            cls = kind_declaration(controller_data["kind"])
            return {d.name: tuple(d.shape) for d in cls.declare(context, controller_data.get("settings") or None)}
        except Exception:
            return None
    for name in plan.inputs:
        if name not in rig.layout:
            problems.append(doc.problem(("controller", "settings"), f"controller reads '{name}', which env {rig.env_id} does not have", f"known names: {', '.join(rig.layout.names)}"))
    return {k: tuple(np.shape(v)) for k, v in plan.values.items()}


def check_semantics(data: dict[str, Any], doc: YamlDocument, *, skip: set[str] = frozenset()) -> list[Problem]:
    """Problems that need the env and the controller kinds: names, bounds, sizes.

    Works on the raw fields so that it can run beside schema problems: fields
    named in ``skip`` (they already failed the schema) are not checked again.
    """
    if "env" not in data or "env" in skip:
        return []
    from .tasks import default_rig

    try:
        rig = default_rig(data["env"])
    except KeyError as exc:
        return [doc.problem(("env",), str(exc.args[0]), "use one of the envs listed")]
    problems: list[Problem] = []
    parameter_shapes: dict[str, tuple[int, ...]] | None = None
    if "controller" in data and "controller" not in skip:
        parameter_shapes = _parameter_shapes(data["controller"], rig, doc, problems)
    state_shapes = rig.layout.shapes()
    for name in sorted(set(state_shapes) & set(parameter_shapes or {})):
        problems.append(doc.problem(("controller", "parameters", name), f"parameter '{name}' has the name of a state quantity", "predicates would be ambiguous; rename the parameter"))
    if parameter_shapes is None:
        return problems  # without the parameters a predicate's names cannot be judged
    names = {**parameter_shapes, **state_shapes}
    from .predicates import PredicateError, parse_predicate

    for label in ("starts_when", "stops_when"):
        if label in data and label not in skip:
            try:
                parse_predicate(data[label], names, what=label)
            except PredicateError as exc:  # the field is named once, by the problem itself
                message = str(exc).removeprefix(f"{label}: ")
                problems.append(doc.problem((label,), message, "predicates may use named state and the controller's parameters"))
    return problems


def resolve_initial_states(doc: YamlDocument) -> tuple[dict[str, Any] | None, list[Problem]]:
    """The spec's ``initial_states`` as a start-distribution mapping (a file is read relative to
    the spec), checked by drawing one state on the spec's env; or (None, problems)."""
    from .initial_states import check_on_env, read_initial_states

    value, field = doc.data["initial_states"], ("initial_states",)
    base = Path(doc.source).parent if Path(doc.source).is_file() else Path.cwd()
    mapping, found = read_initial_states(value, base=base)
    if mapping is None:
        return None, [doc.problem(field, message, fix) for message, fix in found]
    found = check_on_env(mapping, doc.data.get("env"), source=f"{doc.source}: initial_states")
    return (mapping, []) if not found else (None, [doc.problem(field, message, fix) for message, fix in found])


def validate_document(doc: YamlDocument) -> Skill:
    """Schema, value-object and semantic checks; raises InvalidSpecError with every problem."""
    if not isinstance(doc.data, dict):
        raise InvalidSpecError([doc.problem((), "a skill spec must be a YAML mapping of fields", "start with 'name: ...'")])
    schema = _schema_problems(doc)
    skip = {p.field.split(".")[0].split("[")[0] for p in schema if p.field}
    problems = schema + check_semantics(doc.data, doc, skip=skip)
    initial_states = None
    if "initial_states" in doc.data and "initial_states" not in skip:
        initial_states, found = resolve_initial_states(doc)
        problems += found
    if problems:
        raise InvalidSpecError(sorted(problems, key=lambda p: (p.line or 0)))
    skill, problems = _skill_from_data(doc, initial_states)
    if problems:
        raise InvalidSpecError(problems)
    return skill


def _as_spec_error(read, *args) -> YamlDocument:
    try:
        return read(*args)
    except InvalidInputError as exc:
        raise InvalidSpecError(exc.problems) from None


def _current(doc: YamlDocument) -> YamlDocument:
    """The document with old key spellings moved to today's (one warning each)."""
    return _as_spec_error(rename_document, doc, SPEC_RENAMES) if isinstance(doc.data, dict) else doc


def parse_spec_text(text: str, source: str = "<string>") -> Skill:
    """Validate a spec given as YAML text (old spellings read with a warning)."""
    return validate_document(_current(_as_spec_error(load_yaml_text, text, source)))


def load_spec(path: str | Path) -> Skill:
    """Read and validate one spec file (old spellings read with a warning)."""
    return validate_document(_current(_as_spec_error(load_yaml_file, path)))
