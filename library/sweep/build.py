"""A ``SweepSpec`` from what the user gave: a sweep file, a chain file or a skill, plus command-line overrides."""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any, Sequence

from .spec import Axis, SweepSpec
from .sweep_file import is_sweep_file, load_sweep, parse_axis_option

__all__ = ["build_spec"]


def _axes(base: Sequence[Axis], given: Sequence[Axis | str]) -> tuple[Axis, ...]:
    """The file's axes with command-line axes replacing those of the same name, new ones appended."""
    extra = [a if isinstance(a, Axis) else parse_axis_option(a) for a in given]
    names = {a.name for a in extra}
    return tuple(a for a in base if a.name not in names) + tuple(extra)


def build_spec(target: str | Path, *, axes: Sequence[Axis | str] = (), **overrides: Any) -> SweepSpec:
    """``target`` is a sweep file (YAML with ``axes:``), a chain file (YAML with ``skills:``) or a skill
    (name, name@N or a spec file). ``overrides`` (None = keep) replace the file's fields; see ``SweepSpec``."""
    given = {k: v for k, v in overrides.items() if v is not None}
    for key in ("variant", "initial_states"):
        if key in given:
            given[key] = Path(given[key]).resolve()
    text = str(target)
    if text.endswith((".yaml", ".yml")):
        _check_yaml_target(text)
    if text.endswith((".yaml", ".yml")) and Path(text).is_file() and is_sweep_file(text):
        spec = load_sweep(text)
        fields = {**given, "axes": _axes(spec.axes, axes)}
        return dataclasses.replace(spec, **fields, source=spec.source + " (with command-line options)" if given or axes else spec.source)
    if text.endswith((".yaml", ".yml")) and Path(text).is_file() and _is_chain_file(text):
        name = Path(text).stem
        return SweepSpec(name=given.pop("name", name), chain=Path(text).resolve(), axes=_axes((), axes), **given)
    name = given.pop("name", Path(text).stem if text.endswith((".yaml", ".yml")) else text.replace("@", "-"))
    return SweepSpec(name=name, skill=text, axes=_axes((), axes), **given)


def _check_yaml_target(text: str) -> None:
    """A YAML target must exist and be a sweep file (axes:), a chain file (skills:) or a skill spec (controller:)."""
    import difflib

    from ..errors import InvalidInputError
    from ..yaml_source import load_yaml_file

    if not Path(text).is_file():
        raise InvalidInputError(f"{text}: file not found; give a sweep file, a chain file, a skill spec file or a stored skill name")
    data = load_yaml_file(text).data
    keys = [str(k) for k in data] if isinstance(data, dict) else []
    if any(k in keys for k in ("axes", "skills", "controller")):
        return
    from .sweep_file import SWEEP_FIELDS

    unknown = [k for k in keys if k not in SWEEP_FIELDS]  # 'skill:' is a sweep file's own key, not a typo of 'skills:'
    near = [m for k in unknown for m in difflib.get_close_matches(k, ["axes", "skills", "controller"], n=1, cutoff=0.6)]
    guess = f"; did you mean '{near[0]}:'?" if near else ""
    raise InvalidInputError(f"{text}: not a sweep file (no axes:), a chain file (no skills:) or a skill spec (no controller:){guess}")


def _is_chain_file(path: str) -> bool:
    from ..yaml_source import load_yaml_file

    data = load_yaml_file(path).data
    return isinstance(data, dict) and "skills" in data
