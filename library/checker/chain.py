"""Chain files: a planned sequence of skills on one env, the value object and its YAML loader.

A chain file (our own format) names the env, an optional task variant and start
distribution (paths relative to the chain file, or the start inline), the skill
steps (``name``, ``name@N`` or a spec file ``*.yaml``), the required handoff
probability and the confidence of the intervals. ``load_chain`` reports every
problem at once as ``FILE:LINE: field: problem; fix`` (InvalidInputError, exit 2).
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from ..errors import InvalidInputError, KinetomeError, Problem
from ..store.names import REF_PATTERN
from ..yaml_source import YamlDocument, load_yaml_file, load_yaml_text

__all__ = [
    "Chain",
    "CHAIN_FIELDS",
    "DEFAULT_EPISODES",
    "load_chain",
    "parse_chain_text",
    "chain_from_document",
    "step_is_spec_file",
    "resolve_steps",
]

DEFAULT_EPISODES = 200
CHAIN_FIELDS = (
    "chain",
    "description",
    "env",
    "variant",
    "start",
    "steps",
    "require",
    "confidence",
    "episodes",
    "seed",
)
_REQUIRED = ("chain", "env", "steps")
_NAME_RE = re.compile(r"[a-z0-9][a-z0-9_-]{0,63}")
_REF_RE = re.compile(REF_PATTERN)  # name, name@N or name@id:HEX (a content identity pin)
_FIXES = {
    "chain": "name the chain with lowercase letters, digits, '-' or '_', e.g. arm-pick-to-tray",
    "env": "name a registered env, e.g. kinetome/BenchArm-v0",
    "steps": "list skills in order, e.g. [arm-lift@1, arm-reach-tray, arm-place]",
    "require": "give the required handoff probability, e.g. 0.95",
    "confidence": "give the confidence level of the intervals, e.g. 0.95",
    "episodes": "give a whole number of simulated episodes, e.g. 200",
    "seed": "give a whole number >= 0, e.g. 0",
}


def step_is_spec_file(step: str) -> bool:
    """A step naming a spec file (``*.yaml``/``*.yml``) rather than a stored skill."""
    return step.endswith((".yaml", ".yml"))


@dataclass(frozen=True)
class Chain:
    """A validated chain: what to run, from where, and the verdict thresholds.

    ``variant`` and a file ``start`` are absolute paths; ``start`` may also be an
    inline mapping (a start distribution written in the chain file) or None (the
    rig's default start). ``steps`` are store refs or absolute spec paths.
    ``lines`` maps fields (``steps[1]`` too) to their line in ``source``.
    """

    name: str
    env: str
    steps: tuple[str, ...]
    description: str = ""
    variant: Path | None = None
    start: Path | Mapping[str, Any] | None = None
    require: float = 0.95
    confidence: float = 0.95
    episodes: int = DEFAULT_EPISODES
    seed: int = 0
    source: str = field(default="<chain>", compare=False)
    lines: Mapping[str, int] = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "steps", tuple(self.steps))
        problems = _value_problems(self)
        if problems:
            raise InvalidInputError(problems)

    @property
    def n_handoffs(self) -> int:
        return max(0, len(self.steps) - 1)

    def line(self, fieldname: str) -> int | None:
        return self.lines.get(fieldname, self.lines.get(fieldname.split("[")[0]))

    def problem(self, fieldname: str, message: str, fix: str = "") -> Problem:
        return Problem(self.source, self.line(fieldname), fieldname, message, fix)

    def to_dict(self) -> dict[str, Any]:
        start: Any = str(self.start) if isinstance(self.start, Path) else (dict(self.start) if self.start else None)
        return {
            "chain": self.name,
            "description": self.description,
            "env": self.env,
            "variant": None if self.variant is None else str(self.variant),
            "start": start,
            "steps": list(self.steps),
            "require": self.require,
            "confidence": self.confidence,
            "episodes": self.episodes,
            "seed": self.seed,
            "source": self.source,
        }


def _is_probability(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) and 0.0 < x < 1.0


def _is_count(x: Any, low: int) -> bool:
    return isinstance(x, int) and not isinstance(x, bool) and x >= low


def _value_problems(c: Chain) -> list[Problem]:
    """Rules on the values themselves (no files, no store): shared by the loader and the constructor."""
    out: list[Problem] = []
    if not isinstance(c.name, str) or not _NAME_RE.fullmatch(c.name):
        out.append(c.problem("chain", f"must be a name of lowercase letters, digits, '-' or '_', got {c.name!r}", _FIXES["chain"]))
    if not isinstance(c.env, str) or not c.env:
        out.append(c.problem("env", f"must name an env, got {c.env!r}", _FIXES["env"]))
    if not c.steps:
        out.append(c.problem("steps", "must list at least one skill, got an empty chain", _FIXES["steps"]))
    for i, step in enumerate(c.steps):
        if not isinstance(step, str) or not step.strip():
            out.append(c.problem(f"steps[{i}]", f"must be a skill name, name@N or a spec file, got {step!r}", _FIXES["steps"]))
        elif not step_is_spec_file(step) and not _REF_RE.fullmatch(step):
            out.append(
                c.problem(
                    f"steps[{i}]",
                    f"must be a skill name, name@N (N >= 1), name@id:HEX (an identity) or a spec file ending in .yaml, got {step!r}",
                    "write e.g. arm-lift@1",
                )
            )
    for label in ("require", "confidence"):
        value = getattr(c, label)
        if not _is_probability(value):
            out.append(c.problem(label, f"must be a number strictly between 0 and 1, got {value!r}", _FIXES[label]))
    if not _is_count(c.episodes, 1):
        out.append(c.problem("episodes", f"must be a whole number >= 1, got {c.episodes!r}", _FIXES["episodes"]))
    if not _is_count(c.seed, 0):
        out.append(c.problem("seed", f"must be a whole number >= 0, got {c.seed!r}", _FIXES["seed"]))
    if not isinstance(c.description, str):
        out.append(c.problem("description", f"must be text, got {type(c.description).__name__}", "quote it"))
    return out


# ---------------------------------------------------------------------------
# YAML


def _field_lines(doc: YamlDocument) -> dict[str, int]:
    lines: dict[str, int] = {}
    for path, line in doc.lines.items():
        if len(path) == 1 and isinstance(path[0], str):
            lines[path[0]] = line
        elif len(path) == 2 and path[0] == "steps" and isinstance(path[1], int):
            lines[f"steps[{path[1]}]"] = line
    return lines


def _relative(base: Path, value: str) -> Path:
    p = Path(value).expanduser()
    return p if p.is_absolute() else (base / p).resolve()


def _env_problems(doc: YamlDocument, fieldname: str, what: str, path: Path, exc: Exception) -> list[Problem]:
    lines = exc.problems if hasattr(exc, "problems") else [str(exc)]
    out = []
    for item in lines:
        out.append(doc.problem((fieldname,), f"{what} {path} is invalid: {item}", f"fix {path.name} or point {fieldname} at another file"))
    return out


def _check_files(doc: YamlDocument, base: Path, data: Mapping[str, Any]) -> tuple[Path | None, Any, list[Problem]]:
    """Resolve and load the variant and start files so that bad ones fail here, with the chain's line."""
    from kinetome.envs import EnvConfigError

    problems: list[Problem] = []
    variant: Path | None = None
    raw = data.get("variant")
    if raw is not None:
        if not isinstance(raw, str) or not raw.strip():
            problems.append(doc.problem(("variant",), f"must be a path to a variant file, got {raw!r}", "write e.g. ../variants/heavy_payload.yaml"))
        else:
            variant = _relative(base, raw)
            if not variant.is_file():
                where = "" if Path(raw).is_absolute() else f" (looked at {variant})"
                problems.append(doc.problem(("variant",), f"variant file {raw!r} not found{where}", _close_files(variant, "variants")))
            else:
                from kinetome.envs.variants import load_variant

                try:
                    load_variant(variant)
                except (EnvConfigError, OSError, ValueError) as exc:
                    problems += _env_problems(doc, "variant", "variant file", variant, exc)
    start: Any = None
    raw = data.get("start")
    if raw is not None:
        from kinetome.envs.starts import load_start, start_from_mapping

        if isinstance(raw, Mapping):
            try:
                start_from_mapping(raw, source=f"{doc.source}:start")
                start = dict(raw)
            except (EnvConfigError, ValueError) as exc:
                problems += _env_problems(doc, "start", "inline start distribution", Path(doc.source), exc)
        elif not isinstance(raw, str) or not raw.strip():
            problems.append(doc.problem(("start",), f"must be a path to an initial-states file or a mapping, got {raw!r}", "write e.g. ../initial_states/arm_home.yaml"))
        else:
            path = _relative(base, raw)
            start = path
            if not path.is_file():
                where = "" if Path(raw).is_absolute() else f" (looked at {path})"
                problems.append(doc.problem(("start",), f"initial-states file {raw!r} cannot be read: file not found{where}", _close_files(path, "initial_states")))
            else:
                try:
                    load_start(path)
                except (EnvConfigError, OSError, ValueError, UnicodeDecodeError) as exc:
                    problems += _env_problems(doc, "start", "start distribution", path, exc)
    return variant, start, problems


def _close_files(path: Path, kind: str) -> str:
    folder = path.parent
    if folder.is_dir():
        names = sorted(p.name for p in folder.glob("*.y*ml"))
        close = difflib.get_close_matches(path.name, names, n=1)
        if close:
            return f"did you mean {close[0]!r}? files there: {', '.join(names)}"
        if names:
            return f"files in {folder}: {', '.join(names)}"
    return f"give a path relative to the chain file, e.g. ../{kind}/<name>.yaml"


def chain_from_document(doc: YamlDocument, *, base: Path | None = None, store: Any = None) -> Chain:
    """Validate a parsed chain document; raise InvalidInputError listing every problem."""
    base = base if base is not None else Path(".").resolve()
    data = doc.data
    if not isinstance(data, Mapping):
        raise InvalidInputError([doc.problem((), f"a chain file must be a mapping of field: value, got {type(data).__name__}", "start with 'chain: <name>'")])
    problems: list[Problem] = []
    for key in data:
        if key not in CHAIN_FIELDS:
            close = difflib.get_close_matches(str(key), CHAIN_FIELDS, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            problems.append(doc.problem((key,), "unknown field", f"{hint}valid fields: {', '.join(CHAIN_FIELDS)}"))
    for key in _REQUIRED:
        if key not in data:
            problems.append(Problem(doc.source, 1, key, "is required but missing", _FIXES[key]))
    steps_raw = data.get("steps", [])
    if not isinstance(steps_raw, list):
        problems.append(doc.problem(("steps",), f"must be a list of skills, got {type(steps_raw).__name__}", _FIXES["steps"]))
        steps_raw = []
    steps = []
    for i, s in enumerate(steps_raw):
        if isinstance(s, str) and step_is_spec_file(s):
            steps.append(str(_relative(base, s)))
        else:
            steps.append(s if isinstance(s, str) else repr(s))
    variant, start, file_problems = _check_files(doc, base, data)
    problems += file_problems
    lines = _field_lines(doc)
    fields = dict(
        name=data.get("chain", ""),
        env=data.get("env", ""),
        steps=tuple(steps),
        description=data.get("description", "") if data.get("description") is not None else "",
        variant=variant,
        start=start,
        require=data.get("require", 0.95),
        confidence=data.get("confidence", 0.95),
        episodes=data.get("episodes", DEFAULT_EPISODES),
        seed=data.get("seed", 0),
        source=doc.source,
        lines=lines,
    )
    draft = object.__new__(Chain)
    for k, v in fields.items():
        object.__setattr__(draft, k, v)
    required_missing = {p.field for p in problems if p.message == "is required but missing"}
    problems += [p for p in _value_problems(draft) if p.field not in required_missing]
    if isinstance(fields["env"], str) and fields["env"]:
        problems += _env_id_problems(draft)
    if store is not None:
        problems += _step_problems(draft, store)
    if problems:
        raise InvalidInputError(sorted(problems, key=lambda p: (p.line or 0, p.field)))
    return Chain(**fields)


def _env_id_problems(c: Chain) -> list[Problem]:
    from kinetome.envs import rig_ids

    known = rig_ids()
    if c.env in known:
        return []
    close = difflib.get_close_matches(c.env, known, n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    return [c.problem("env", f"unknown env {c.env!r}", f"{hint}known envs: {', '.join(known)}")]


def _step_problems(c: Chain, store: Any) -> list[Problem]:
    """Every step must resolve: a stored version (missing versions list the existing ones) or a valid spec file."""
    out: list[Problem] = []
    for i, step in enumerate(c.steps):
        if not isinstance(step, str) or not step:
            continue
        where = f"steps[{i}]"
        if step_is_spec_file(step):
            if not Path(step).is_file():
                out.append(c.problem(where, f"spec file {step} not found", "give a path relative to the chain file"))
                continue
            from ..spec_load import load_spec

            try:
                load_spec(step)
            except InvalidInputError as exc:
                out += [c.problem(where, f"spec file {Path(step).name} is invalid: {p}", "fix the spec") for p in exc.problems]
            continue
        if not _REF_RE.fullmatch(step):
            continue
        try:
            store.get(step)
        except KinetomeError as exc:
            fix = "register it with `kinetome add <spec.yaml>`" if "@" not in step else "use an existing version"
            out.append(c.problem(where, str(exc), fix))
    return out


def resolve_steps(chain: Chain, store: Any) -> None:
    """Raise InvalidInputError (exit 2) if a step does not resolve in ``store``."""
    problems = _step_problems(chain, store)
    if problems:
        raise InvalidInputError(problems)


def load_chain(path: str | Path, *, store: Any = None) -> Chain:
    """Read and validate a chain file; with ``store``, every step must resolve in it."""
    path = Path(path)
    doc = load_yaml_file(path)
    return chain_from_document(doc, base=path.resolve().parent, store=store)


def parse_chain_text(text: str, *, source: str = "<string>", base: Path | None = None, store: Any = None) -> Chain:
    """Validate chain YAML given as text (relative paths resolve against ``base``)."""
    return chain_from_document(load_yaml_text(text, source), base=base, store=store)
