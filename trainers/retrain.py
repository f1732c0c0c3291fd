"""``retrain_skill``: refine one skill on a (changed) task in flat mode and measure it before and after."""

from __future__ import annotations

import copy
import dataclasses
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

import numpy as np

from .config import TrainConfig
from .curves import curve_csv
from .evaluate import SkillMetrics, evaluate_skill
from .normaliser import save_normalisers
from .option_critic import OptionCriticTrainer
from .search import ParameterSearch
from .progress import ProgressFn
from .trainable import trainable_from_loaded

__all__ = ["RetrainResult", "retrain_skill", "reinitialise_controller", "refuse_deliberation_cost", "choose_method",
           "METHODS", "SEARCH_BY_DEFAULT"]

# How retrain refines a skill: the clipped-surrogate actor-critic (per-step action noise) or a
# search of the skill's bounded parameters (CMA-ES, trainers/search.py).
METHODS = ("actor-critic", "search")
# Kinds retrained by search unless --method says otherwise: where it beat the actor-critic on our
# benchmarks (README, "Parameter search": the oscillator gait on the waxed floor).
SEARCH_BY_DEFAULT = frozenset({"cpg"})


@dataclass(frozen=True, eq=False)
class RetrainResult:
    """A refined skill: its new controller values, how it was made and how it does.

    ``parameters`` (name -> array) and ``parameters_bytes`` (safetensors, the
    store's ``params.safetensors`` format) hold the refined controller;
    ``normaliser`` the trainer's observation/return normalisers (safetensors);
    ``curve`` one row per update (see ``curves.CURVE_COLUMNS``); ``before`` the
    skill as given (the stored version), ``after`` the refined one, both
    measured on the same seeded starts with exploration off.
    """

    skill_ref: str
    parameters: dict[str, np.ndarray]
    parameters_bytes: bytes
    normaliser: bytes | None  # None for the parameter search (it keeps no normalisers)
    curve: list[dict[str, Any]]
    before: SkillMetrics
    after: SkillMetrics
    steps: int
    updates: int
    config: TrainConfig
    seed: int
    from_scratch: bool
    completed: bool
    wall_time: float
    variant: str | None = None
    method: str = "actor-critic"  # one of METHODS
    TITLE = "retraining {self.skill_ref}"

    @property
    def improved(self) -> bool:
        return (self.after.success_rate, self.after.mean_return) > (self.before.success_rate, self.before.mean_return)

    def curve_csv(self) -> str:
        return curve_csv(self.curve)

    def save_curves(self, directory: str | Path, *, stem: str = "curves") -> tuple[Path, Path]:
        """Write the learning curve as ``<stem>.csv`` and ``<stem>.png`` (matplotlib, Agg)."""
        from .curves import save_curves

        return save_curves(self.curve, directory, stem=stem, title=self.TITLE.format(self=self))

    def metadata(self) -> dict[str, Any]:
        """JSON-able record for the child version's lineage."""
        return {
            "parent": self.skill_ref,
            "variant": self.variant,
            "seed": self.seed,
            "from_scratch": self.from_scratch,
            "trainer": "cma-es" if self.method == "search" else "actor-critic",  # how the child was refined
            "env_steps": self.steps,
            "updates": self.updates,
            "completed": self.completed,
            "wall_time_s": round(self.wall_time, 3),
            "config": self.config.as_dict(),
            "before": self.before.as_dict(),
            "after": self.after.as_dict(),
        }


def reinitialise_controller(controller: Any, *, keep: tuple[str, ...] = ()) -> None:
    """Put every parameter except ``keep`` at its kind's default, else the middle of its bounds."""
    values = controller.parameter_values()
    bounds = controller.parameter_bounds()
    fresh: dict[str, np.ndarray] = {}
    for decl in controller.declarations:
        if decl.name in keep:
            fresh[decl.name] = values[decl.name]
            continue
        low, high = bounds[decl.name]
        if decl.default is not None:
            fresh[decl.name] = np.clip(np.asarray(decl.default, dtype=np.float64), low, high)
        else:
            fresh[decl.name] = 0.5 * (low + high)
    controller.load_values(fresh)


def refuse_deliberation_cost(config: TrainConfig, where: str = "deliberation_cost") -> None:
    """Flat retraining has one skill and no switches, so a deliberation cost would change nothing: refuse it."""
    from kinetome.library.errors import InvalidInputError

    if config.deliberation_cost:
        raise InvalidInputError(
            f"{where} must be 0 for retrain, got {config.deliberation_cost:g}: flat retraining runs one skill "
            "with no switches, so a deliberation cost has nothing to act on; leave it out, or train the skills "
            "together with `kinetome train` (options mode) where it is charged at every switch"
        )


def choose_method(kind: str, requested: str = "auto") -> str:
    """The retrain method for a controller kind: ``requested`` unless it is ``auto``, else search for
    ``SEARCH_BY_DEFAULT`` kinds and the actor-critic for the rest."""
    from kinetome.library.errors import InvalidInputError

    if requested == "auto":
        return "search" if kind in SEARCH_BY_DEFAULT else "actor-critic"
    if requested not in METHODS:
        raise InvalidInputError(f"--method must be auto or one of {', '.join(METHODS)}, got {requested!r}")
    return requested


def retrain_skill(
    skill: Any,
    rig: Any,
    config: TrainConfig,
    *,
    start: Any = None,
    seed: int,
    workers: int = 1,
    progress: ProgressFn | TextIO | None = None,
    checkpoint_dir: str | Path | None = None,
    resume: bool = False,
    from_scratch: bool = False,
    method: str = "actor-critic",
) -> RetrainResult:
    """Refine ``skill`` (a ``LoadedSkill``) on ``rig``; the given skill is not modified.

    Flat mode: one skill, an episode per skill run from a start inside
    ``starts_when`` until ``stops_when`` (success: terminal, plus
    ``config.success_bonus``), env termination, or ``max_steps`` (truncated).
    Parameters named by the predicates stay fixed. ``seed`` overrides
    ``config.seed``; evaluation uses the same seed before and after.
    ``method``: ``actor-critic`` or ``search`` (CMA-ES over the bounded
    parameters, same budget, objective, checkpoints and progress rows).
    """
    refuse_deliberation_cost(config)
    method = choose_method(skill.controller.kind, method)
    t0 = time.perf_counter()
    config = dataclasses.replace(config, seed=int(seed))
    work, trainable = _working_copy(skill, from_scratch=from_scratch)

    def measure(which: Any) -> SkillMetrics:
        return evaluate_skill(which, rig, start=start, episodes=config.eval_episodes, seed=seed, workers=workers, gamma=config.gamma)

    def evaluate() -> dict[str, float]:
        m = measure(work)
        return {"eval_success_rate": m.success_rate, "eval_return": m.mean_return}

    before = measure(skill)
    if method == "search":
        search = ParameterSearch(work, rig, config, start=start, frozen=trainable.frozen, workers=workers,
                                 checkpoint_dir=checkpoint_dir, progress=progress, evaluate=evaluate)
        outcome = search.run(resume=resume)
    else:
        trainer = OptionCriticTrainer(
            [trainable], rig, config, start=start, episode_per_skill=True, workers=workers,
            checkpoint_dir=checkpoint_dir, progress=progress, evaluate=evaluate,
        )
        outcome = trainer.run(resume=resume)
    return _result(skill, work, rig, config, outcome, before=before, after=measure(work), from_scratch=from_scratch, t0=t0,
                   method=method)


def _working_copy(skill: Any, *, from_scratch: bool) -> tuple[Any, Any]:
    """A copy of the loaded skill with its own controller, and the trainer's view of it."""
    controller = copy.deepcopy(skill.controller)
    work = dataclasses.replace(skill, controller=controller)
    trainable = trainable_from_loaded(work)
    if from_scratch:
        reinitialise_controller(controller, keep=trainable.frozen)
        trainable.adapt_inputs = True
    return work, trainable


def _result(skill: Any, work: Any, rig: Any, config: TrainConfig, outcome: Any, *, before: SkillMetrics,
            after: SkillMetrics, from_scratch: bool, t0: float, method: str) -> RetrainResult:
    from kinetome.library.controllers import save_parameters

    variant = getattr(rig, "variant", None)
    searched = method == "search"
    return RetrainResult(
        skill_ref=skill.ref,
        parameters=work.controller.parameter_values(),
        parameters_bytes=save_parameters(work.controller),
        normaliser=None if searched else save_normalisers(None, outcome.obs_norm, outcome.ret_norm),
        curve=list(outcome.rows),
        before=before,
        after=after,
        steps=outcome.steps,
        updates=outcome.generations if searched else outcome.updates,
        config=config,
        seed=config.seed,
        from_scratch=from_scratch,
        completed=outcome.completed,
        wall_time=time.perf_counter() - t0,
        variant=getattr(variant, "name", None) if variant is not None else None,
        method=method,
    )
