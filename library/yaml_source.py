"""Read YAML safely and remember the line of every key and item.

Validation errors must say ``FILE:LINE: field.path``; PyYAML's composed node
tree carries marks, so we build plain Python data from it with a side table
path -> line. Only the safe constructors are used: no tags, no objects.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import yaml

from kinetome.envs.yaml_limits import YamlTooLarge, compose_within_limits

from .errors import InvalidInputError, Problem

__all__ = ["YamlDocument", "load_yaml_text", "load_yaml_file", "field_path", "field_lines", "unknown_keys"]

PathKey = tuple[str | int, ...]


@dataclass(frozen=True)
class YamlDocument:
    """Parsed YAML plus where each value came from."""

    source: str
    data: Any
    lines: dict[PathKey, int] = field(default_factory=dict)

    def line(self, path: PathKey) -> int | None:
        """Line of ``path``, else of its nearest enclosing value that has one."""
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return self.lines.get((), 1)

    def problem(self, path: PathKey, message: str, fix: str = "") -> Problem:
        return Problem(self.source, self.line(path), field_path(path), message, fix)


def field_path(path: PathKey) -> str:
    """``("controller", "parameters", "kp", 1)`` -> ``controller.parameters.kp[1]``."""
    text = ""
    for part in path:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def _to_python(node: yaml.Node, path: PathKey, lines: dict[PathKey, int], constructor: yaml.SafeLoader) -> Any:
    lines[path] = node.start_mark.line + 1
    if isinstance(node, yaml.MappingNode):
        out: dict[Any, Any] = {}
        for key_node, value_node in node.value:
            key = constructor.construct_object(key_node, deep=True)
            if not isinstance(key, (str, int, float, bool)) or key is None:
                key = str(key)
            out[key] = _to_python(value_node, (*path, key), lines, constructor)
            lines[(*path, key)] = key_node.start_mark.line + 1
        return out
    if isinstance(node, yaml.SequenceNode):
        return [_to_python(item, (*path, i), lines, constructor) for i, item in enumerate(node.value)]
    return constructor.construct_object(node, deep=True)


def load_yaml_text(text: str, source: str = "<string>") -> YamlDocument:
    """Parse one YAML document; syntax errors and oversized files (see
    ``kinetome.envs.yaml_limits``) become a Problem with the line."""
    try:
        loader, node = compose_within_limits(text)
    except YamlTooLarge as exc:
        raise InvalidInputError([Problem(source, exc.line, "", str(exc))]) from None
    except yaml.YAMLError as exc:
        raise _syntax_problem(exc, source) from None
    try:
        lines: dict[PathKey, int] = {}
        data = None if node is None else _to_python(node, (), lines, loader)
    except yaml.YAMLError as exc:
        raise _syntax_problem(exc, source) from None
    finally:
        loader.dispose()
    return YamlDocument(source, data, lines)


def _syntax_problem(exc: yaml.YAMLError, source: str) -> InvalidInputError:
    if isinstance(exc, yaml.MarkedYAMLError):
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else None
        return InvalidInputError([Problem(source, line, "", f"not valid YAML: {exc.problem or exc}", "fix the syntax at that line")])
    return InvalidInputError([Problem(source, None, "", f"not valid YAML: {exc}")])


def load_yaml_file(path: str | Path) -> YamlDocument:
    """Read and parse a YAML file; a missing or unreadable file is a clean error."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InvalidInputError([Problem(str(path), None, "", "file not found", "check the path")]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InvalidInputError([Problem(str(path), None, "", f"cannot read file: {exc}")]) from None
    return load_yaml_text(text, str(path))


def field_lines(doc: YamlDocument) -> dict[str, int]:
    """Line of every field, keyed by its dotted path (``skills[1].skill``), as value objects record them."""
    return {field_path(path): line for path, line in doc.lines.items() if path}


def unknown_keys(doc: YamlDocument, data: Mapping[str, Any], where: tuple, known: tuple[str, ...]) -> list[Problem]:
    """One problem per key of ``data`` not in ``known``, at its line, with the closest valid name."""
    import difflib

    out = []
    for key in data:
        if key not in known:
            close = difflib.get_close_matches(str(key), known, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            label = ".".join(str(p) for p in where)
            out.append(doc.problem((*where, key), "unknown field", f"{hint}valid fields{' of ' + label if where else ''}: {', '.join(known)}"))
    return out
