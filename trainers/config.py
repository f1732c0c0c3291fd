"""Training settings: the frozen ``TrainConfig`` and its YAML form (line-numbered errors).

A training file is a YAML mapping of ``TrainConfig`` settings plus, for
``kinetome train``, top-level ``skills:`` (refs or spec paths), a
``description:`` and a ``task:`` mapping (``TrainTask``: env, task variant and
initial states). Files written with the older spellings (``steps``, ``n_envs``,
``lam``, ``task.notes``, ``task.skills``, ``task.start``, ...) are read with one
warning per old key (``TRAIN_RENAMES``).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import MISSING, asdict, dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from kinetome.library.errors import InvalidInputError, Problem
from kinetome.library.renamed_keys import TRAIN_RENAMES, rename_document, rename_keys
from kinetome.library.runtime.learned import CLOCK_INPUTS, STOP_MODES

__all__ = [
    "TrainConfig",
    "TrainTask",
    "TrainFile",
    "STOP_MODES",
    "TRAIN_RENAMES",
    "load_train_file",
    "load_train_config",
    "load_train_task",
    "config_from_mapping",
    "config_from_stored",
]

# How a stop head relates to stops_when: see kinetome.library.runtime.learned (the runtime runs the same rule).

@dataclass(frozen=True)
class TrainConfig:
    """Hyperparameters of the option actor-critic trainer.

    Budget: ``env_step_budget`` env steps in total, collected ``parallel_envs`` x
    ``segment_steps`` per update; each update makes ``update_passes`` passes over
    the collected samples in minibatches of ``minibatch_size``. ``lambda_`` is
    GAE's lambda (written ``lambda`` in YAML and JSON). ``policy_shift_limit``
    ends an update's passes early once the policy moved that far (approximate
    KL); ``gradient_norm_cap`` caps the global gradient norm. ``deliberation_cost``
    (eta) is charged at every switch between skills and added to the stop
    advantage. ``skill_epsilon`` is the exploration rate of the epsilon-greedy
    policy over skills (on the critic's Q). ``checkpoint_every`` counts updates
    (0 = never). ``critic_inputs`` adds inputs to the critic and stop heads:
    ``time_remaining`` (the time limit becomes part of the task, so reaching
    it ends an episode without a bootstrap; Pardo, Tavakoli, Levdik & Kormushev
    2018) and ``phase`` (sin and cos of the running oscillator's phase).
    ``search_*`` set the parameter search (``trainers.search``, CMA-ES), which
    spends the same ``env_step_budget``.
    """

    env_step_budget: int = 100_000
    parallel_envs: int = 16
    segment_steps: int = 128
    update_passes: int = 10
    minibatch_size: int = 256
    learning_rate: float = 3e-4
    learning_rate_schedule: str = "constant"  # or "linear" (to zero at the end of the budget)
    gamma: float = 0.99
    lambda_: float = 0.95
    clip_ratio: float = 0.2
    entropy_weight: float = 0.0
    critic_loss_weight: float = 0.5
    critic_clip: float | None = None
    gradient_norm_cap: float = 0.5
    policy_shift_limit: float | None = None
    standardise_advantages: bool = True
    standardise_observations: bool = True
    scale_rewards: bool = True
    critic_hidden: tuple[int, ...] = (64, 64)
    critic_inputs: tuple[str, ...] = ()  # extra critic (and stop head) inputs: time_remaining, phase
    stop_mode: str = "registered"
    stop_hidden: tuple[int, ...] = ()
    stop_lr: float = 1e-3
    stop_init_logit: float = -2.0  # initial logit: beta about 0.12
    deliberation_cost: float = 0.0
    skill_epsilon: float = 0.05
    success_bonus: float = 0.0
    max_episode_steps: int | None = None  # default: the rig's max_episode_steps
    search_population: int | None = None  # parameter search: candidates per generation (None: 4 + 3 ln d)
    search_step_size: float = 0.05  # parameter search: initial step, as a fraction of each parameter's bound range
    search_episodes: int = 8  # parameter search: episodes per candidate (the same start states for all)
    search_finalists: int = 1  # parameter search: candidates compared at the end (final mean + best seen); 1 = the final mean
    search_final_episodes: int = 16  # parameter search: fresh episodes per finalist (used when search_finalists > 1)
    eval_episodes: int = 32
    eval_every: int = 0  # updates between evaluations (0 = only before and after)
    checkpoint_every: int = 10
    log_every: int = 1
    seed: int = 0

    def __post_init__(self) -> None:
        problems = _validate(self)
        if problems:
            raise ValueError("; ".join(problems))

    @property
    def batch_size(self) -> int:
        """Samples per update: parallel_envs x segment_steps."""
        return self.parallel_envs * self.segment_steps

    @property
    def updates(self) -> int:
        """Updates the budget allows (at least one)."""
        return max(1, math.ceil(self.env_step_budget / self.batch_size))

    def as_dict(self) -> dict[str, Any]:
        """The settings under their file spellings (``lambda``, lists for layer widths)."""
        out = {_FILE_NAMES.get(k, k): v for k, v in asdict(self).items()}
        out["critic_hidden"] = list(self.critic_hidden)
        out["critic_inputs"] = list(self.critic_inputs)
        out["stop_hidden"] = list(self.stop_hidden)
        return out


# Python field -> key in files where the key is a Python keyword.
_FILE_NAMES = {"lambda_": "lambda"}
_FIELD_NAMES = {v: k for k, v in _FILE_NAMES.items()}

def _validate(c: TrainConfig) -> list[str]:
    out: list[str] = []

    def positive_int(name: str) -> None:
        v = getattr(c, name)
        if not isinstance(v, int) or isinstance(v, bool) or v < 1:
            out.append(f"{name} must be a positive integer, got {v!r}")

    def nonneg_int(name: str) -> None:
        v = getattr(c, name)
        if not isinstance(v, int) or isinstance(v, bool) or v < 0:
            out.append(f"{name} must be an integer >= 0, got {v!r}")

    def number(name: str, low: float, high: float, *, open_low: bool = False, optional: bool = False) -> None:
        v = getattr(c, name)
        if v is None and optional:
            return
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            out.append(f"{name} must be a finite number, got {v!r}")
        elif (v <= low if open_low else v < low) or v > high:
            lo = "(" if open_low else "["
            out.append(f"{name} must lie in {lo}{low:g}, {high:g}], got {v!r}")

    for name in ("env_step_budget", "parallel_envs", "segment_steps", "update_passes", "minibatch_size", "eval_episodes", "log_every"):
        positive_int(name)
    for name in ("checkpoint_every", "eval_every", "seed"):
        nonneg_int(name)
    if c.max_episode_steps is not None:
        positive_int("max_episode_steps")
    if c.search_population is not None:
        positive_int("search_population")
        if isinstance(c.search_population, int) and c.search_population < 2:
            out.append(f"search_population must be at least 2, got {c.search_population!r}")
    positive_int("search_episodes")
    positive_int("search_finalists")
    positive_int("search_final_episodes")
    number("search_step_size", 0.0, 1.0, open_low=True)
    number("learning_rate", 0.0, 1.0, open_low=True)
    number("stop_lr", 0.0, 1.0, open_low=True)
    number("gamma", 0.0, 1.0)
    number("lambda_", 0.0, 1.0)
    number("clip_ratio", 0.0, 1.0, open_low=True)
    number("entropy_weight", 0.0, 1.0)
    number("critic_loss_weight", 0.0, 100.0)
    number("critic_clip", 0.0, math.inf, open_low=True, optional=True)
    number("gradient_norm_cap", 0.0, math.inf, open_low=True)
    number("policy_shift_limit", 0.0, math.inf, open_low=True, optional=True)
    number("stop_init_logit", -20.0, 20.0)
    number("deliberation_cost", 0.0, math.inf)
    number("skill_epsilon", 0.0, 1.0)
    number("success_bonus", -1e6, 1e6)
    for name in ("standardise_advantages", "standardise_observations", "scale_rewards"):
        if not isinstance(getattr(c, name), bool):
            out.append(f"{name} must be true or false, got {getattr(c, name)!r}")
    out += _list_problems(c)
    if c.stop_mode not in STOP_MODES:
        out.append(f"stop_mode must be one of {', '.join(STOP_MODES)}, got {c.stop_mode!r}")
    if c.learning_rate_schedule not in ("constant", "linear"):
        out.append(f"learning_rate_schedule must be constant or linear, got {c.learning_rate_schedule!r}")
    return [_file_spelling(line) for line in out]


def _list_problems(c: TrainConfig) -> list[str]:
    """Problems of the list settings: layer widths and critic inputs."""
    out = []
    for name in ("critic_hidden", "stop_hidden"):
        v = getattr(c, name)
        if not isinstance(v, tuple) or not all(isinstance(h, int) and not isinstance(h, bool) and h >= 1 for h in v):
            out.append(f"{name} must be a list of positive layer widths, got {v!r}")
    v = c.critic_inputs
    if not isinstance(v, tuple) or not all(x in CLOCK_INPUTS for x in v) or len(set(v)) != len(v):
        out.append(f"critic_inputs must be a list of distinct names among {', '.join(CLOCK_INPUTS)}, got {v!r}")
    return out


def _file_spelling(message: str) -> str:
    return message.replace("lambda_ must", "lambda must")


@dataclass(frozen=True)
class TrainTask:
    """The task a training file trains on: env, task variant and initial states.

    ``variant``/``initial_states`` are names or YAML paths; relative paths in a
    file are resolved against that file's folder by ``load_train_file``.
    """

    env: str | None = None
    variant: str | None = None
    initial_states: str | None = None

    def __post_init__(self) -> None:
        for name in ("env", "variant", "initial_states"):
            v = getattr(self, name)
            if v is not None and (not isinstance(v, str) or not v):
                raise ValueError(f"task.{name} must be a non-empty string, got {v!r}")


@dataclass(frozen=True)
class TrainFile:
    """A whole training file: settings, the skills to train, the task and a description."""

    config: TrainConfig
    skills: tuple[str, ...] = ()
    task: TrainTask | None = None
    description: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.skills, tuple) or not all(isinstance(s, str) and s for s in self.skills):
            raise ValueError(f"skills must be a list of skill refs or spec paths, got {self.skills!r}")


_LIST_FIELDS = {"critic_hidden", "critic_inputs", "stop_hidden"}
_FILE_KEYS = {"task", "skills", "description"}  # read by load_train_file, not settings


def _setting_names() -> list[str]:
    return [_FILE_NAMES.get(f.name, f.name) for f in fields(TrainConfig)]


def config_from_mapping(data: dict[str, Any], *, source: str = "<mapping>", lines: dict | None = None) -> TrainConfig:
    """Build a ``TrainConfig`` from plain data (current spellings), reporting every problem with its line."""
    lines = lines or {}
    problems: list[Problem] = []
    names = _setting_names()
    values: dict[str, Any] = {}
    for key, value in data.items():
        if key in _FILE_KEYS:
            continue
        line = lines.get((key,))
        if key not in names:
            close = difflib.get_close_matches(str(key), names, n=1)
            fix = f"did you mean {close[0]!r}?" if close else f"known settings: {', '.join(names)}"
            problems.append(Problem(source, line, str(key), "unknown training setting", fix))
            continue
        name = _FIELD_NAMES.get(key, key)
        if name in _LIST_FIELDS and isinstance(value, list):
            value = tuple(value)
        if isinstance(value, int) and not isinstance(value, bool) and _is_float_field(name):
            value = float(value)
        values[name] = value
        try:
            replace(TrainConfig(), **{name: value})
        except (ValueError, TypeError) as exc:
            problems.append(Problem(source, line, key, str(exc), "see configs/training/ for examples"))
    if problems:
        raise InvalidInputError(problems)
    return TrainConfig(**values)


def config_from_stored(data: dict[str, Any], *, source: str) -> TrainConfig:
    """A ``TrainConfig`` from a stored ``as_dict()`` (checkpoints, lineage); older spellings read silently."""
    renamed, _ = rename_keys(data, TRAIN_RENAMES, source=source, warn=False)
    return config_from_mapping(renamed, source=source)


def _is_float_field(name: str) -> bool:
    f = next(f for f in fields(TrainConfig) if f.name == name)
    default = f.default if f.default is not MISSING else None
    return isinstance(default, float) or name in ("critic_clip", "policy_shift_limit")


def _read(path: str | Path) -> Any:
    from kinetome.library.yaml_source import load_yaml_file

    doc = load_yaml_file(path)
    if not isinstance(doc.data, dict):
        raise InvalidInputError(
            [Problem(str(path), 1, "", f"a training file must be a mapping of settings, got {type(doc.data).__name__}", "write key: value lines")]
        )
    return rename_document(doc, TRAIN_RENAMES)


def load_train_file(path: str | Path) -> TrainFile:
    """Read a whole training YAML file (``InvalidInputError`` lists every problem; old spellings warn once)."""
    doc = _read(path)
    config = config_from_mapping(doc.data, source=str(path), lines=doc.lines)
    skills = doc.data.get("skills", ())
    if isinstance(skills, str):
        skills = (skills,)
    elif isinstance(skills, list):
        skills = tuple(skills)
    description = doc.data.get("description", "")
    try:
        return TrainFile(config, skills, _task(doc, path), description if isinstance(description, str) else str(description))
    except ValueError as exc:
        raise InvalidInputError([Problem(str(path), doc.line(("skills",)), "skills", str(exc), "write skills: [name, name@N, ...]")]) from None


def load_train_config(path: str | Path) -> TrainConfig:
    """Read a training YAML file's settings into a ``TrainConfig``."""
    return load_train_file(path).config


def load_train_task(path: str | Path) -> TrainTask | None:
    """The file's ``task:`` section, or None when it has none."""
    return load_train_file(path).task


def _task(doc: Any, path: str | Path) -> TrainTask | None:
    task = doc.data.get("task")
    if task is None:
        return None
    line = doc.lines.get(("task",))
    if not isinstance(task, dict):
        raise InvalidInputError([Problem(str(path), line, "task", f"must be a mapping, got {type(task).__name__}", "give env/variant/initial_states keys")])
    known = [f.name for f in fields(TrainTask)]
    problems = [
        Problem(str(path), doc.lines.get(("task", k)), f"task.{k}", "unknown task setting", f"known: {', '.join(known)}")
        for k in task
        if k not in known
    ]
    if problems:
        raise InvalidInputError(problems)
    values = dict(task)
    for key in ("variant", "initial_states"):
        # a relative .yaml path is read relative to the training file's folder
        v = values.get(key)
        if isinstance(v, str) and v.endswith((".yaml", ".yml")) and not Path(v).is_absolute():
            values[key] = str((Path(path).parent / v).resolve())
    try:
        return TrainTask(**values)
    except ValueError as exc:
        raise InvalidInputError([Problem(str(path), line, "task", str(exc))]) from None
