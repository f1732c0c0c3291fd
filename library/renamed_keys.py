"""Read files that use an old key spelling: move each value to its new key and warn once.

Every loader of a user file (spec, chain, variant, initial states, training
config) and every reader of stored JSON passes its data through
``rename_keys`` with its own table of ``Renamed`` entries. Paths are dotted
(``task.notes``); a value may move between levels (``task.notes`` ->
``description``, ``start`` -> ``task.initial_states``) and may be converted
(a scalar ``require: P`` -> ``{handoff: P}``). The line table of a
``YamlDocument`` moves with the values, so later errors still point at the
line the user wrote. Giving both the old and the new spelling is an error.

The tables of old spellings live here too: this module (with the CLI's
``library/cli/old_spellings.py``) is where old spellings are meant to appear;
``tests/test_vocabulary.py`` fails if one shows up anywhere else.
"""

from __future__ import annotations

import copy
import warnings
from dataclasses import dataclass, replace
from typing import Any, Callable, Iterable, Mapping

from .errors import InvalidInputError, Problem

__all__ = [
    "TRAIN_RENAMES",
    "SPEC_RENAMES",
    "META_RENAMES",
    "OUTCOME_RENAMES",
    "CURVE_RENAMES",
    "DURATION_OUTPUT_RENAMES",
    "Renamed",
    "RenamedKeyWarning",
    "rename_keys",
    "rename_document",
    "renamed_arguments",
    "renamed_table",
]

PathKey = tuple[Any, ...]


# ---- the tables: old spelling -> current spelling --------------------------------

# Training files (and checkpoints, lineage records) written before the rename.
TRAIN_RENAMES = {
    "steps": "env_step_budget",
    "n_envs": "parallel_envs",
    "rollout_len": "segment_steps",
    "epochs": "update_passes",
    "minibatch": "minibatch_size",
    "lr": "learning_rate",
    "lr_schedule": "learning_rate_schedule",
    "lam": "lambda",
    "clip": "clip_ratio",
    "entropy_coef": "entropy_weight",
    "value_coef": "critic_loss_weight",
    "value_clip": "critic_clip",
    "max_grad_norm": "gradient_norm_cap",
    "target_kl": "policy_shift_limit",
    "normalise_advantages": "standardise_advantages",
    "normalise_observations": "standardise_observations",
    "normalise_rewards": "scale_rewards",
    "termination": "stop_mode",
    "termination_hidden": "stop_hidden",
    "termination_lr": "stop_lr",
    "termination_init": "stop_init_logit",
    "episode_steps": "max_episode_steps",
    "task.skills": "skills",
    "task.notes": "description",
    "task.start": "task.initial_states",
}

# Skill specs (YAML files, and spec.json inside stored versions).
SPEC_RENAMES = {"controller.options": "controller.settings"}

# Lineage metadata that retrain and train stored (read silently by show and lineage).
META_RENAMES = {
    "steps": "env_steps",
    "termination_rate": "stop_rate",
    **{f"{m}.{old}": f"{m}.{new}" for m in ("before", "after", "metrics_before", "metrics_after") for old, new in (("mean_steps", "mean_duration"), ("reasons", "outcomes"))},
}

# Learning-curve columns (rows in trainer checkpoints written before the rename; curve.csv
# files stored inside older versions keep their header as written).
CURVE_RENAMES = {"steps": "env_steps", "lr": "learning_rate", "termination_rate": "stop_rate", "length_mean": "mean_duration"}

# How a skill's turn ended, as stored in metrics and option models.
OUTCOME_RENAMES = {"env_terminated": "env_ended", "terminated": "env_ended"}

# Outputs of a stored duration model (its head and its held-out errors).
DURATION_OUTPUT_RENAMES = {"steps": "duration"}


class RenamedKeyWarning(UserWarning):
    """A file used an old key spelling; the message names the new one, the file and the line."""


@dataclass(frozen=True)
class Renamed:
    """``old`` (dotted path) is now written ``new``; ``convert`` rewrites the value if its form changed.

    ``when`` limits the rule to values it accepts. ``old == new`` is a change of
    form only (a scalar ``require: P`` that is now ``require: {handoff: P}``): it
    needs ``convert`` and ``when``, and its ``hint`` says what to write.
    """

    old: str
    new: str
    convert: Callable[[Any], Any] | None = None
    when: Callable[[Any], bool] | None = None
    hint: str = ""  # shown after the new spelling, e.g. "write require: {handoff: P}"

    def __post_init__(self) -> None:
        if not self.old or not self.new:
            raise ValueError(f"a rename needs two dotted paths, got {self.old!r} -> {self.new!r}")
        if self.old == self.new and (self.convert is None or self.when is None or not self.hint):
            raise ValueError(f"a change of form at {self.old!r} needs convert, when and hint")

    def message(self, where: str) -> str:
        """The warning text for a file location ``where`` (``FILE:LINE``)."""
        if self.old == self.new:
            return f"{where}: '{self.old}' is written in an old form; {self.hint}"
        hint = f" ({self.hint})" if self.hint else ""
        return f"{where}: '{self.old}' is an old spelling; write '{self.new}' instead{hint}"


def renamed_table(pairs: Mapping[str, str] | Iterable[Renamed]) -> tuple[Renamed, ...]:
    """``{"old": "new"}`` or ``Renamed`` entries, as a tuple of ``Renamed``."""
    if isinstance(pairs, Mapping):
        return tuple(Renamed(old, new) for old, new in pairs.items())
    return tuple(pairs)


def _split(path: str) -> PathKey:
    return tuple(path.split("."))


def _parent(data: dict, path: PathKey, *, create: bool) -> dict | None:
    """The mapping that holds ``path[-1]``; None when a level is missing (or not a mapping)."""
    node: Any = data
    for key in path[:-1]:
        if not isinstance(node, dict):
            return None
        if key not in node:
            if not create:
                return None
            node[key] = {}
        node = node[key]
    return node if isinstance(node, dict) else None


def _line(lines: Mapping[PathKey, int], path: PathKey) -> int | None:
    while path:
        if path in lines:
            return lines[path]
        path = path[:-1]
    return None


def _move_lines(lines: dict[PathKey, int], old: PathKey, new: PathKey) -> None:
    for key in [k for k in lines if k[: len(old)] == old]:
        lines[new + key[len(old):]] = lines.pop(key)
    if new in lines:
        for depth in range(1, len(new)):
            # a parent created by the move (``task`` for ``start`` -> ``task.initial_states``)
            lines.setdefault(new[:depth], lines[new])


def rename_keys(
    data: Any,
    renames: Mapping[str, str] | Iterable[Renamed],
    *,
    source: str,
    lines: Mapping[PathKey, int] | None = None,
    warn: bool = True,
    stacklevel: int = 2,
) -> tuple[Any, dict[PathKey, int]]:
    """Return ``(data, lines)`` with every old key moved to its new spelling.

    ``data`` is not modified (a changed copy is returned). With ``warn``, one
    ``RenamedKeyWarning`` per old key found: ``FILE:LINE: 'old' is an old
    spelling; write 'new' instead``. Old and new spellings together raise
    ``InvalidInputError`` naming both. Non-mapping data is returned as is.
    """
    out_lines = dict(lines or {})
    if not isinstance(data, dict):
        return data, out_lines
    out = data
    problems: list[Problem] = []
    found: list[tuple[int, str]] = []
    for r in renamed_table(renames):
        old, new = _split(r.old), _split(r.new)
        holder = _parent(out, old, create=False)
        if holder is None or old[-1] not in holder or (r.when is not None and not r.when(holder[old[-1]])):
            continue
        if out is data:
            out = copy.deepcopy(data)
            holder = _parent(out, old, create=False)
        line = _line(out_lines, old)
        where = f"{source}:{line}" if line is not None else source
        found.append((line or 0, r.message(where)))
        if old == new:
            holder[old[-1]] = r.convert(holder[old[-1]])
            continue
        target = _parent(out, new, create=True)
        if target is None or new[-1] in target:
            problems.append(Problem(source, line, r.old, f"old spelling of '{r.new}', which is given too", f"keep only '{r.new}'"))
            continue
        value = holder.pop(old[-1])
        target[new[-1]] = r.convert(value) if r.convert is not None else value
        _move_lines(out_lines, old, new)
    if problems:
        raise InvalidInputError(problems)
    if warn:
        for _, message in sorted(found):
            warnings.warn(RenamedKeyWarning(message), stacklevel=stacklevel)
    return out, out_lines


def rename_document(doc: Any, renames: Mapping[str, str] | Iterable[Renamed], *, warn: bool = True) -> Any:
    """A ``YamlDocument`` with its data and line table renamed (see ``rename_keys``)."""
    data, lines = rename_keys(doc.data, renames, source=doc.source, lines=doc.lines, warn=warn, stacklevel=3)
    return replace(doc, data=data, lines=lines)


def renamed_arguments(renames: Mapping[str, str]) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """Accept old keyword names of a Python API function, with one warning each naming the new one."""
    import functools

    def decorate(fn: Callable[..., Any]) -> Callable[..., Any]:
        @functools.wraps(fn)
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            for old, new in renames.items():
                if old in kwargs:
                    if new in kwargs:
                        raise TypeError(f"{fn.__name__}() got both '{old}' (old spelling) and '{new}'; pass only '{new}'")
                    warnings.warn(RenamedKeyWarning(f"{fn.__name__}(): '{old}' is an old spelling; write '{new}' instead"), stacklevel=2)
                    kwargs[new] = kwargs.pop(old)
            return fn(*args, **kwargs)

        return wrapper

    return decorate
