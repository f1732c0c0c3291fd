"""Training settings: the frozen ``TrainConfig`` and its YAML form (line-numbered errors).

A training file is a YAML mapping of ``TrainConfig`` fields plus an optional
``task:`` mapping (``TrainTask``) saying what the file is meant to train:
skill refs or spec paths, the env, a task variant and a start distribution.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import MISSING, asdict, dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from kinetome.library.errors import InvalidInputError, Problem

__all__ = ["TrainConfig", "TrainTask", "TERMINATION_MODES", "load_train_config", "load_train_task", "config_from_mapping"]

# How a skill's termination beta(s, w) relates to its stops_when predicate:
#   registered: beta = 1 where stops_when holds, 0 elsewhere (nothing learned; the stored behaviour)
#   hard:       beta = 1 where stops_when holds, a learned sigmoid elsewhere (may stop early)
#   confined:   a learned sigmoid where stops_when holds, 0 elsewhere (may run past its stop)
#   learned:    a learned sigmoid everywhere
# Every mode also stops a skill after max_steps.
TERMINATION_MODES = ("registered", "hard", "confined", "learned")


@dataclass(frozen=True)
class TrainConfig:
    """Hyperparameters of the option actor-critic trainer.

    Budgets: ``steps`` env steps in total, collected ``n_envs`` x ``rollout_len``
    per update; each update runs ``epochs`` passes over the rollout in
    minibatches of ``minibatch`` samples. ``deliberation_cost`` (eta) is charged
    at every switch between skills and added to the termination advantage.
    ``skill_epsilon`` is the exploration rate of the epsilon-greedy policy over
    skills (on the critic's Q). ``checkpoint_every`` counts updates (0 = never).
    """

    steps: int = 100_000
    n_envs: int = 16
    rollout_len: int = 128
    epochs: int = 10
    minibatch: int = 256
    lr: float = 3e-4
    lr_schedule: str = "constant"  # or "linear" (to zero at the end of the budget)
    gamma: float = 0.99
    lam: float = 0.95
    clip: float = 0.2
    entropy_coef: float = 0.0
    value_coef: float = 0.5
    value_clip: float | None = None
    max_grad_norm: float = 0.5
    target_kl: float | None = None
    normalise_advantages: bool = True
    normalise_observations: bool = True
    normalise_rewards: bool = True
    critic_hidden: tuple[int, ...] = (64, 64)
    termination: str = "registered"
    termination_hidden: tuple[int, ...] = ()
    termination_lr: float = 1e-3
    termination_init: float = -2.0  # initial logit: beta about 0.12
    deliberation_cost: float = 0.0
    skill_epsilon: float = 0.05
    success_bonus: float = 0.0
    episode_steps: int | None = None  # default: the rig's max_episode_steps
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
        """Samples per update: n_envs x rollout_len."""
        return self.n_envs * self.rollout_len

    @property
    def updates(self) -> int:
        """Updates the budget allows (at least one)."""
        return max(1, math.ceil(self.steps / self.batch_size))

    def as_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["critic_hidden"] = list(self.critic_hidden)
        out["termination_hidden"] = list(self.termination_hidden)
        return out


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

    for name in ("steps", "n_envs", "rollout_len", "epochs", "minibatch", "eval_episodes", "log_every"):
        positive_int(name)
    for name in ("checkpoint_every", "eval_every", "seed"):
        nonneg_int(name)
    if c.episode_steps is not None:
        positive_int("episode_steps")
    number("lr", 0.0, 1.0, open_low=True)
    number("termination_lr", 0.0, 1.0, open_low=True)
    number("gamma", 0.0, 1.0)
    number("lam", 0.0, 1.0)
    number("clip", 0.0, 1.0, open_low=True)
    number("entropy_coef", 0.0, 1.0)
    number("value_coef", 0.0, 100.0)
    number("value_clip", 0.0, math.inf, open_low=True, optional=True)
    number("max_grad_norm", 0.0, math.inf, open_low=True)
    number("target_kl", 0.0, math.inf, open_low=True, optional=True)
    number("termination_init", -20.0, 20.0)
    number("deliberation_cost", 0.0, math.inf)
    number("skill_epsilon", 0.0, 1.0)
    number("success_bonus", -1e6, 1e6)
    for name in ("normalise_advantages", "normalise_observations", "normalise_rewards"):
        if not isinstance(getattr(c, name), bool):
            out.append(f"{name} must be true or false, got {getattr(c, name)!r}")
    for name in ("critic_hidden", "termination_hidden"):
        v = getattr(c, name)
        if not isinstance(v, tuple) or not all(isinstance(h, int) and not isinstance(h, bool) and h >= 1 for h in v):
            out.append(f"{name} must be a list of positive layer widths, got {v!r}")
    if c.termination not in TERMINATION_MODES:
        out.append(f"termination must be one of {', '.join(TERMINATION_MODES)}, got {c.termination!r}")
    if c.lr_schedule not in ("constant", "linear"):
        out.append(f"lr_schedule must be constant or linear, got {c.lr_schedule!r}")
    return out


@dataclass(frozen=True)
class TrainTask:
    """What a training file is for: skills (refs or spec paths), env, variant and starts.

    ``variant``/``start`` are names or YAML paths; relative paths in a file
    are resolved against that file's folder by ``load_train_task``.
    """

    skills: tuple[str, ...] = ()
    env: str | None = None
    variant: str | None = None
    start: str | None = None
    notes: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.skills, tuple) or not all(isinstance(s, str) and s for s in self.skills):
            raise ValueError(f"task.skills must be a list of skill refs or spec paths, got {self.skills!r}")
        for name in ("env", "variant", "start"):
            v = getattr(self, name)
            if v is not None and (not isinstance(v, str) or not v):
                raise ValueError(f"task.{name} must be a non-empty string, got {v!r}")


_LIST_FIELDS = {"critic_hidden", "termination_hidden"}


def _field_names(cls: type) -> list[str]:
    return [f.name for f in fields(cls)]


def config_from_mapping(data: dict[str, Any], *, source: str = "<mapping>", lines: dict | None = None) -> TrainConfig:
    """Build a ``TrainConfig`` from plain data, reporting every problem with its line."""
    lines = lines or {}
    problems: list[Problem] = []
    names = _field_names(TrainConfig)
    values: dict[str, Any] = {}
    for key, value in data.items():
        if key == "task":
            continue
        line = lines.get((key,))
        if key not in names:
            close = difflib.get_close_matches(str(key), names, n=1)
            fix = f"did you mean {close[0]!r}?" if close else f"known fields: {', '.join(names)}"
            problems.append(Problem(source, line, str(key), "unknown training setting", fix))
            continue
        if key in _LIST_FIELDS and isinstance(value, list):
            value = tuple(value)
        if isinstance(value, int) and not isinstance(value, bool) and _is_float_field(key):
            value = float(value)
        values[key] = value
        try:
            replace(TrainConfig(), **{key: value})
        except (ValueError, TypeError) as exc:
            problems.append(Problem(source, line, key, str(exc), "see configs/training/ for examples"))
    if problems:
        raise InvalidInputError(problems)
    return TrainConfig(**values)


def _is_float_field(name: str) -> bool:
    f = next(f for f in fields(TrainConfig) if f.name == name)
    default = f.default if f.default is not MISSING else None
    return isinstance(default, float) or name in ("value_clip", "target_kl")


def _read(path: str | Path) -> Any:
    from kinetome.library.yaml_source import load_yaml_file

    doc = load_yaml_file(path)
    if not isinstance(doc.data, dict):
        raise InvalidInputError(
            [Problem(str(path), 1, "", f"a training file must be a mapping of settings, got {type(doc.data).__name__}", "write key: value lines")]
        )
    return doc


def load_train_config(path: str | Path) -> TrainConfig:
    """Read a training YAML file into a ``TrainConfig`` (``InvalidInputError`` lists every problem)."""
    doc = _read(path)
    return config_from_mapping(doc.data, source=str(path), lines=doc.lines)


def load_train_task(path: str | Path) -> TrainTask | None:
    """The file's ``task:`` section, or None when it has none."""
    doc = _read(path)
    task = doc.data.get("task")
    if task is None:
        return None
    line = doc.lines.get(("task",))
    if not isinstance(task, dict):
        raise InvalidInputError([Problem(str(path), line, "task", f"must be a mapping, got {type(task).__name__}", "give skills/env/variant/start keys")])
    known = _field_names(TrainTask)
    problems = [
        Problem(str(path), doc.lines.get(("task", k)), f"task.{k}", "unknown task setting", f"known: {', '.join(known)}")
        for k in task
        if k not in known
    ]
    if problems:
        raise InvalidInputError(problems)
    values = dict(task)
    for key in ("variant", "start"):
        # a relative .yaml path is read relative to the training file's folder
        v = values.get(key)
        if isinstance(v, str) and v.endswith((".yaml", ".yml")) and not Path(v).is_absolute():
            values[key] = str((Path(path).parent / v).resolve())
    if isinstance(values.get("skills"), list):
        values["skills"] = tuple(values["skills"])
    elif isinstance(values.get("skills"), str):
        values["skills"] = (values["skills"],)
    try:
        return TrainTask(**values)
    except ValueError as exc:
        raise InvalidInputError([Problem(str(path), line, "task", str(exc))]) from None
