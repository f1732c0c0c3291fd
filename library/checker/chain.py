"""Chain files: a planned sequence of skills on one task, the value object and its YAML loader.

A chain file (our own format) names the task (env, optional task variant and
initial states, paths relative to the chain file or initial states inline),
the skills in order (``name``, ``name@N``, a spec file ``*.yaml``, or a mapping
``{skill: ref, may_time_out: true}``), the requirements (each handoff's success
probability and the whole chain's), the confidence, the simulation budget and
the disturbances of stochastic episodes. ``load_chain`` reports every problem
at once as ``FILE:LINE: field: problem; fix`` (InvalidInputError, exit 2).
Files in the wave-1 format (``chain:``, top-level ``env``/``variant``/``start``,
``steps:``, scalar ``require``) load with one warning per old key.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from ..errors import InvalidInputError, KinetomeError, Problem
from ..runtime.disturbances import NO_DISTURBANCES, Disturbances
from ..store.names import REF_PATTERN
from ..yaml_source import YamlDocument, field_lines, load_yaml_file, load_yaml_text, unknown_keys
from .chain_files import check_task_files, close_files, old_spelling_table

__all__ = [
    "DISTURBANCE_FIELDS",
    "disturbances_from_yaml",
    "Chain",
    "CHAIN_FIELDS",
    "DEFAULT_EPISODES",
    "DEFAULT_REQUIRE",
    "load_chain",
    "parse_chain_text",
    "chain_from_document",
    "skill_is_spec_file",
    "resolve_skills",
]

DEFAULT_EPISODES = 200
DEFAULT_REQUIRE = 0.95
CHAIN_FIELDS = ("name", "description", "task", "skills", "require", "confidence", "episodes", "seed", "disturbances", "handoff_limits")
HANDOFF_LIMIT_FIELDS = ("command_jump",)
TASK_FIELDS = ("env", "variant", "initial_states")
REQUIRE_FIELDS = ("handoff", "chain")
DISTURBANCE_FIELDS = ("exploration", "sensor_noise", "action_delay_steps", "gain_spread")
SKILL_ITEM_FIELDS = ("skill", "may_time_out")
_REQUIRED = ("name", "task", "skills")
_NAME_RE = re.compile(r"[a-z0-9][a-z0-9_-]{0,63}")
_REF_RE = re.compile(REF_PATTERN)  # name, name@N or name@id:HEX (a content identity pin)
_FIXES = {
    "name": "name the chain with lowercase letters, digits, '-' or '_', e.g. arm-pick-to-tray",
    "task": "give the task, e.g. task: {env: kinetome/BenchArm-v0}",
    "task.env": "name a registered env, e.g. kinetome/BenchArm-v0",
    "skills": "list skills in order, e.g. [arm-lift@1, arm-reach-tray, {skill: arm-place, may_time_out: true}]",
    "require.handoff": "give each handoff's required success probability, e.g. 0.95",
    "require.chain": "give the whole chain's required success probability, e.g. 0.9",
    "confidence": "give the confidence level of the bounds, e.g. 0.95",
    "episodes": "give a whole number of simulated episodes, e.g. 200",
    "seed": "give a whole number >= 0, e.g. 0",
}


def skill_is_spec_file(ref: str) -> bool:
    """A chain item naming a spec file (``*.yaml``/``*.yml``) rather than a stored skill."""
    return ref.endswith((".yaml", ".yml"))


@dataclass(frozen=True)
class Chain:
    """A validated chain: what to run, on which task, and the verdict thresholds.

    ``variant`` and a file ``initial_states`` are absolute paths; ``initial_states``
    may also be an inline mapping or None (the robot's default). ``skills`` are
    store refs or absolute spec paths; ``may_time_out[i]`` allows skill i to time
    out and still hand over. ``require_chain`` None means "same as the handoff
    requirement". ``lines`` maps fields (``skills[1]``, ``task.env``...) to lines.
    """

    name: str
    env: str
    skills: tuple[str, ...]
    may_time_out: tuple[bool, ...] = ()
    description: str = ""
    variant: Path | None = None
    initial_states: Path | Mapping[str, Any] | None = None
    require_handoff: float = DEFAULT_REQUIRE
    require_chain: float | None = None
    confidence: float = 0.95
    episodes: int = DEFAULT_EPISODES
    seed: int = 0
    disturbances: Disturbances = NO_DISTURBANCES
    command_jump: float | None = None  # handoff_limits.command_jump: largest allowed jump in command at a switch
    source: str = field(default="<chain>", compare=False)
    lines: Mapping[str, int] = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "skills", tuple(self.skills))
        flags = tuple(self.may_time_out) or tuple(False for _ in self.skills)
        object.__setattr__(self, "may_time_out", tuple(bool(x) for x in flags))
        problems = _value_problems(self)
        if problems:
            raise InvalidInputError(problems)

    @property
    def n_handoffs(self) -> int:
        return max(0, len(self.skills) - 1)

    @property
    def chain_requirement(self) -> float:
        """The whole chain's required success probability."""
        return self.require_handoff if self.require_chain is None else self.require_chain

    def line(self, fieldname: str) -> int | None:
        while fieldname:
            if fieldname in self.lines:
                return self.lines[fieldname]
            cut = max(fieldname.rfind("."), fieldname.rfind("["))
            fieldname = fieldname[:cut] if cut > 0 else ""
        return None

    def problem(self, fieldname: str, message: str, fix: str = "") -> Problem:
        return Problem(self.source, self.line(fieldname), fieldname, message, fix)

    def to_dict(self) -> dict[str, Any]:
        init = self.initial_states
        initial: Any = str(init) if isinstance(init, Path) else (dict(init) if init else None)
        skills = [ref if not flag else {"skill": ref, "may_time_out": True} for ref, flag in zip(self.skills, self.may_time_out)]
        return {
            "name": self.name,
            "description": self.description,
            "task": {"env": self.env, "variant": None if self.variant is None else str(self.variant), "initial_states": initial},
            "skills": skills,
            "require": {"handoff": self.require_handoff, "chain": self.chain_requirement},
            "confidence": self.confidence,
            "episodes": self.episodes,
            "seed": self.seed,
            "disturbances": self.disturbances.to_dict(),
            "handoff_limits": {"command_jump": self.command_jump},
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
        out.append(c.problem("name", f"must be a name of lowercase letters, digits, '-' or '_', got {c.name!r}", _FIXES["name"]))
    if not isinstance(c.env, str) or not c.env:
        out.append(c.problem("task.env", f"must name an env, got {c.env!r}", _FIXES["task.env"]))
    if not c.skills:
        out.append(c.problem("skills", "must list at least one skill, got an empty chain", _FIXES["skills"]))
    if len(c.may_time_out) != len(c.skills):
        out.append(c.problem("skills", f"needs one may_time_out flag per skill, got {len(c.may_time_out)} for {len(c.skills)}"))
    for i, ref in enumerate(c.skills):
        if not isinstance(ref, str) or not ref.strip():
            out.append(c.problem(f"skills[{i}]", f"must be a skill name, name@N or a spec file, got {ref!r}", _FIXES["skills"]))
        elif not skill_is_spec_file(ref) and not _REF_RE.fullmatch(ref):
            out.append(c.problem(f"skills[{i}]", f"must be a skill name, name@N (N >= 1), name@id:HEX (an identity) or a spec file ending in .yaml, got {ref!r}", "write e.g. arm-lift@1"))
    probabilities = [("require.handoff", c.require_handoff), ("require.chain", c.require_chain), ("confidence", c.confidence)]
    for label, value in probabilities:
        if not (value is None and label == "require.chain") and not _is_probability(value):
            out.append(c.problem(label, f"must be a number strictly between 0 and 1, got {value!r}", _FIXES[label]))
    if not _is_count(c.episodes, 1):
        out.append(c.problem("episodes", f"must be a whole number >= 1, got {c.episodes!r}", _FIXES["episodes"]))
    if not _is_count(c.seed, 0):
        out.append(c.problem("seed", f"must be a whole number >= 0, got {c.seed!r}", _FIXES["seed"]))
    jump = c.command_jump
    if jump is not None and (isinstance(jump, bool) or not isinstance(jump, (int, float)) or not math.isfinite(jump) or jump <= 0):
        out.append(c.problem("handoff_limits.command_jump", f"must be a number > 0 (in the actuators' command units), got {jump!r}", "write e.g. command_jump: 2.0"))
    if not isinstance(c.description, str):
        out.append(c.problem("description", f"must be text, got {type(c.description).__name__}", "quote it"))
    return out


# ---------------------------------------------------------------------------
# YAML


def _mapping(doc: YamlDocument, data: Mapping[str, Any], key: str, known: tuple[str, ...], problems: list[Problem]) -> dict[str, Any]:
    raw = data.get(key)
    if raw is None:
        return {}
    if not isinstance(raw, Mapping):
        problems.append(doc.problem((key,), f"must be a mapping of {', '.join(known)}, got {raw!r}", f"write e.g. {key}: {{{known[0]}: ...}}"))
        return {}
    problems += unknown_keys(doc, raw, (key,), known)
    return dict(raw)


def _skill_items(doc: YamlDocument, base: Path, raw: Any, problems: list[Problem]) -> tuple[list[str], list[bool]]:
    if raw is None:
        return [], []
    if not isinstance(raw, list):
        problems.append(doc.problem(("skills",), f"must be a list of skills, got {type(raw).__name__}", _FIXES["skills"]))
        return [], []
    refs, flags = [], []
    for i, item in enumerate(raw):
        flag: Any = False
        if isinstance(item, Mapping):
            problems += unknown_keys(doc, item, ("skills", i), SKILL_ITEM_FIELDS)
            if "skill" not in item:
                problems.append(doc.problem(("skills", i), "a mapping item needs 'skill'", "write {skill: arm-place, may_time_out: true}"))
            flag = item.get("may_time_out", False)
            if not isinstance(flag, bool):
                problems.append(doc.problem(("skills", i, "may_time_out"), f"must be true or false, got {flag!r}", "write may_time_out: true"))
                flag = False
            item = item.get("skill", "")
        if isinstance(item, str) and skill_is_spec_file(item):
            p = Path(item).expanduser()
            item = str(p if p.is_absolute() else (base / p).resolve())
        refs.append(item if isinstance(item, str) else repr(item))
        flags.append(bool(flag))
    return refs, flags


def disturbances_from_yaml(doc: YamlDocument, raw: Mapping[str, Any], problems: list[Problem]) -> Disturbances:
    """A file's ``disturbances:`` mapping as a value object; each bad field becomes a problem at its line."""
    draft = object.__new__(Disturbances)
    for key, default in NO_DISTURBANCES.to_dict().items():
        object.__setattr__(draft, key, raw.get(key, default))
    found = draft.problems()
    for fieldname, message, fix in found:
        problems.append(doc.problem(("disturbances", fieldname), message, fix))
    return NO_DISTURBANCES if found else Disturbances.from_mapping({k: raw[k] for k in raw if k in DISTURBANCE_FIELDS})


def _require(doc: YamlDocument, data: Mapping[str, Any], problems: list[Problem]) -> tuple[Any, Any]:
    raw = _mapping(doc, data, "require", REQUIRE_FIELDS, problems)
    return raw.get("handoff", DEFAULT_REQUIRE), raw.get("chain")


def chain_from_document(doc: YamlDocument, *, base: Path | None = None, store: Any = None) -> Chain:
    """Validate a parsed chain document; raise InvalidInputError listing every problem."""
    from ..renamed_keys import rename_document

    base = base if base is not None else Path(".").resolve()
    if isinstance(doc.data, Mapping):
        doc = rename_document(doc, old_spelling_table())
    data = doc.data
    if not isinstance(data, Mapping):
        raise InvalidInputError([doc.problem((), f"a chain file must be a mapping of field: value, got {type(data).__name__}", "start with 'name: <name>'")])
    problems: list[Problem] = unknown_keys(doc, data, (), CHAIN_FIELDS)
    for key in _REQUIRED:
        if key not in data:
            problems.append(Problem(doc.source, 1, key, "is required but missing", _FIXES[key]))
    task = _mapping(doc, data, "task", TASK_FIELDS, problems)
    if isinstance(data.get("task"), Mapping) and "env" not in task:
        problems.append(doc.problem(("task",), "env is required but missing", _FIXES["task.env"]))
    skills, flags = _skill_items(doc, base, data.get("skills"), problems)
    variant, initial, file_problems = check_task_files(doc, base, task)
    problems += file_problems
    handoff, whole = _require(doc, data, problems)
    disturbances = disturbances_from_yaml(doc, _mapping(doc, data, "disturbances", DISTURBANCE_FIELDS, problems), problems)
    handoff_limits = _mapping(doc, data, "handoff_limits", HANDOFF_LIMIT_FIELDS, problems)
    fields = dict(
        name=data.get("name", ""),
        env=task.get("env", ""),
        skills=tuple(skills),
        may_time_out=tuple(flags),
        description=data.get("description", "") if data.get("description") is not None else "",
        variant=variant,
        initial_states=initial,
        require_handoff=handoff,
        require_chain=whole,
        confidence=data.get("confidence", 0.95),
        episodes=data.get("episodes", DEFAULT_EPISODES),
        seed=data.get("seed", 0),
        disturbances=disturbances,
        command_jump=handoff_limits.get("command_jump"),
        source=doc.source,
        lines=field_lines(doc),
    )
    draft = object.__new__(Chain)
    for k, v in fields.items():
        object.__setattr__(draft, k, v)
    reported = {p.field for p in problems if "required but missing" in p.message}
    if "task" in reported or "env" not in task:
        reported.add("task.env")
    problems += [p for p in _value_problems(draft) if p.field not in reported]
    if isinstance(fields["env"], str) and fields["env"]:
        problems += _env_id_problems(draft)
    if store is not None:
        problems += _skill_problems(draft, store)
    if problems:
        raise InvalidInputError(sorted(set(problems), key=lambda p: (p.line or 0, p.field, p.message)))
    return Chain(**fields)


def _env_id_problems(c: Chain) -> list[Problem]:
    from kinetome.envs import rig_ids

    known = rig_ids()
    if c.env in known:
        return []
    close = difflib.get_close_matches(c.env, known, n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    return [c.problem("task.env", f"unknown env {c.env!r}", f"{hint}known envs: {', '.join(known)}")]


def _skill_problems(c: Chain, store: Any) -> list[Problem]:
    """Every skill must resolve: a stored version (missing versions list the existing ones) or a valid spec file."""
    out: list[Problem] = []
    for i, ref in enumerate(c.skills):
        if not isinstance(ref, str) or not ref:
            continue
        where = f"skills[{i}]"
        if skill_is_spec_file(ref):
            if not Path(ref).is_file():
                out.append(c.problem(where, f"spec file {ref} not found", close_files(Path(ref), "skills")))
                continue
            from ..spec_load import load_spec

            try:
                load_spec(ref)
            except InvalidInputError as exc:
                out += [c.problem(where, f"spec file {Path(ref).name} is invalid: {p}", "fix the spec") for p in exc.problems]
            continue
        if not _REF_RE.fullmatch(ref):
            continue
        try:
            store.get(ref)
        except KinetomeError as exc:
            fix = "register it with `kinetome register <spec.yaml>`" if "@" not in ref else "use an existing version"
            out.append(c.problem(where, str(exc), fix))
    return out


def resolve_skills(chain: Chain, store: Any) -> None:
    """Raise InvalidInputError (exit 2) if a skill does not resolve in ``store``."""
    problems = _skill_problems(chain, store)
    if problems:
        raise InvalidInputError(problems)


def load_chain(path: str | Path, *, store: Any = None) -> Chain:
    """Read and validate a chain file; with ``store``, every skill must resolve in it."""
    path = Path(path)
    doc = load_yaml_file(path)
    return chain_from_document(doc, base=path.resolve().parent, store=store)


def parse_chain_text(text: str, *, source: str = "<string>", base: Path | None = None, store: Any = None) -> Chain:
    """Validate chain YAML given as text (relative paths resolve against ``base``)."""
    return chain_from_document(load_yaml_text(text, source), base=base, store=store)
