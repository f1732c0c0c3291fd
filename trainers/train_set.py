"""``train_skills``: learn a policy over several skills, their terminations and refinements together."""

from __future__ import annotations

import copy
import dataclasses
import math
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import torch

from .config import TrainConfig
from .curves import curve_csv
from .normaliser import save_normalisers
from .option_critic import OptionCriticTrainer, TrainOutcome, torch_threads
from .progress import ProgressFn
from .rollout import Collector
from .trainable import TrainableSkill, trainable_from_loaded

__all__ = ["TrainSetResult", "train_skills", "train_trainables", "measure_options"]


@dataclass(frozen=True, eq=False)
class TrainSetResult:
    """Skills trained together as options.

    ``parameters``/``parameters_bytes``: refined controller values per skill
    ref; ``critic``/``terminations``/``normaliser``: safetensors of the critic
    Q(s, w) (whose epsilon-greedy choice is the policy over skills), the
    termination heads (None in ``registered`` mode) and the normalisers.
    ``termination_rate`` (terminations per env step inside episodes),
    ``mean_skill_duration`` (mean steps of a skill's turn) and ``skill_share``
    (fraction of steps per skill) come from an evaluation run with action
    noise off and greedy skill choice; the termination heads stay stochastic.
    """

    skill_refs: tuple[str, ...]
    parameters: dict[str, dict[str, np.ndarray]]
    parameters_bytes: dict[str, bytes]
    critic: bytes
    terminations: bytes | None
    normaliser: bytes
    curve: list[dict[str, Any]]
    termination_rate: float
    mean_skill_duration: float
    mean_return: float
    skill_share: dict[str, float]
    steps: int
    updates: int
    config: TrainConfig
    completed: bool
    wall_time: float
    episode_limit: int = 0  # steps an episode lasted at most (the clock inputs count against it)
    TITLE = "options {self.skill_refs}"

    def stop_files(self, index: int) -> dict[str, bytes]:
        """The files that make skill ``index`` run its learned stop as trained (none in ``registered`` mode)."""
        from kinetome.library.runtime.files import LEARNED_STOP_FILE, STOP_HEADS_FILE
        from kinetome.library.runtime.learned import learned_stop_json

        if self.terminations is None:
            return {}
        doc = learned_stop_json(self.config.stop_mode, index, self.config.critic_inputs, self.episode_limit)
        return {LEARNED_STOP_FILE: doc, STOP_HEADS_FILE: self.terminations}

    def chooser_files(self, refs: list[str]) -> dict[str, bytes]:
        """The policy over skills as a runnable chooser over the stored ``refs`` (in training order)."""
        from kinetome.library.runtime.files import CHOOSER_FILE, CHOOSER_NET_FILE, NORMALISER_FILE
        from kinetome.library.runtime.learned import chooser_json

        if len(refs) != len(self.skill_refs):
            raise ValueError(f"refs must name the {len(self.skill_refs)} trained skills in order, got {refs}")
        doc = chooser_json(refs, self.config.critic_inputs, self.episode_limit)
        return {CHOOSER_FILE: doc, CHOOSER_NET_FILE: self.critic, NORMALISER_FILE: self.normaliser}

    def curve_csv(self) -> str:
        return curve_csv(self.curve)

    def save_curves(self, directory: str | Path, *, stem: str = "curves") -> tuple[Path, Path]:
        """Write the learning curve as ``<stem>.csv`` and ``<stem>.png`` (matplotlib, Agg)."""
        from .curves import save_curves

        return save_curves(self.curve, directory, stem=stem, title=self.TITLE.format(self=self))

    def metadata(self) -> dict[str, Any]:
        return {
            "skills": list(self.skill_refs),
            "stop_rate": _finite_or_none(self.termination_rate),  # None: nothing measured (JSON has no NaN)
            "mean_skill_duration": _finite_or_none(self.mean_skill_duration),
            "mean_return": _finite_or_none(self.mean_return),
            "skill_share": self.skill_share,
            "env_steps": self.steps,
            "updates": self.updates,
            "completed": self.completed,
            "wall_time_s": round(self.wall_time, 3),
            "config": self.config.as_dict(),
        }


def _finite_or_none(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def measure_options(
    trainables: list[TrainableSkill],
    rig: Any,
    config: TrainConfig,
    outcome: TrainOutcome,
    *,
    start: Any = None,
    seed: int,
    rollouts: int = 2,
    workers: int = 1,
) -> dict[str, Any]:
    """Stop rate, mean skill duration, return and skill share with exploration off.

    Runs ``rollouts`` segments, then more until as many episodes have ended as there are
    parallel envs: with short segments two of them may end no episode and no turn, which
    left every mean undefined (NaN). Episodes last at most the episode limit, so
    ``ceil(limit / segment_steps) + 1`` more segments always end one in every env.
    """
    from .starts import StartSampler

    eval_cfg = dataclasses.replace(config, seed=seed)
    collector = Collector(
        rig=rig,
        skills=trainables,
        config=eval_cfg,
        sampler=StartSampler(rig, start),
        episode_per_skill=False,
        nthread=workers,
        critic=outcome.critic,
        heads=outcome.heads,
        obs_norm=copy.deepcopy(outcome.obs_norm),
        ret_norm=copy.deepcopy(outcome.ret_norm),
        np_rng=np.random.default_rng([seed, 2]),
        torch_gen=torch.Generator().manual_seed(seed + 2),
        explore=False,
    )
    with torch_threads(1):
        collector.start()
        durations: list[int] = []
        terminations = steps = 0
        returns: list[float] = []
        counts = np.zeros(len(trainables))
        cap = rollouts + -(-int(collector.limit) // config.segment_steps) + 1
        done = 0
        while done < rollouts or (len(returns) < collector.n and done < cap):
            collector.collect()
            done += 1
            st = collector.stats
            durations += st.skill_durations
            terminations += st.terminations
            steps += st.skill_steps
            returns += st.returns
            counts += st.skill_counts
    return {
        "stop_rate": terminations / steps if steps else math.nan,
        "mean_skill_duration": float(np.mean(durations)) if durations else math.nan,
        "mean_return": float(np.mean(returns)) if returns else math.nan,
        "skill_share": {s.name: float(c / counts.sum()) for s, c in zip(trainables, counts)} if counts.sum() else {},
    }


def train_trainables(
    trainables: list[TrainableSkill],
    rig: Any,
    config: TrainConfig,
    *,
    start: Any = None,
    workers: int = 1,
    progress: ProgressFn | TextIO | None = None,
    checkpoint_dir: str | Path | None = None,
    resume: bool = False,
) -> TrainSetResult:
    """``train_skills`` on ready ``TrainableSkill``s (controllers are trained in place)."""
    from safetensors.numpy import save

    from kinetome.library.controllers import save_parameters

    from .checkpoint import module_tensors

    t0 = time.perf_counter()
    trainer = OptionCriticTrainer(
        trainables, rig, config, start=start, episode_per_skill=False, workers=workers,
        checkpoint_dir=checkpoint_dir, progress=progress,
    )
    outcome = trainer.run(resume=resume)
    measured = measure_options(trainables, rig, config, outcome, start=start, seed=config.seed, workers=workers)
    return TrainSetResult(
        skill_refs=tuple(t.name for t in trainables),
        parameters={t.name: t.controller.parameter_values() for t in trainables},
        parameters_bytes={t.name: save_parameters(t.controller) for t in trainables},
        critic=save(module_tensors("critic", outcome.critic)),
        terminations=None if outcome.heads is None else save(module_tensors("heads", outcome.heads)),
        normaliser=save_normalisers(None, outcome.obs_norm, outcome.ret_norm),
        curve=list(outcome.rows),
        termination_rate=measured["stop_rate"],
        mean_skill_duration=measured["mean_skill_duration"],
        mean_return=measured["mean_return"],
        skill_share=measured["skill_share"],
        steps=outcome.steps,
        updates=outcome.updates,
        config=config,
        completed=outcome.completed,
        wall_time=time.perf_counter() - t0,
        episode_limit=int(config.max_episode_steps or rig.max_episode_steps),
    )


def train_skills(
    skills: list[Any],
    rig: Any,
    config: TrainConfig,
    *,
    start: Any = None,
    seed: int | None = None,
    workers: int = 1,
    progress: ProgressFn | TextIO | None = None,
    checkpoint_dir: str | Path | None = None,
    resume: bool = False,
) -> TrainSetResult:
    """Train ``skills`` (``LoadedSkill``s) as options on ``rig``'s task reward; inputs are not modified.

    An episode runs until the env terminates or the episode limit; inside it
    a skill runs until its termination (``config.stop_mode``) or
    ``max_steps``, then the next is chosen epsilon-greedy on Q among skills
    whose ``starts_when`` holds; when none holds the episode ends there
    (a refusal). Each switch costs ``config.deliberation_cost``.
    """
    if not skills:
        raise ValueError("train_skills needs at least one skill")
    if seed is not None:
        config = dataclasses.replace(config, seed=int(seed))
    refs = [s.ref for s in skills]
    if len(set(refs)) != len(refs):
        raise ValueError(f"skills must be distinct, got {refs}")
    trainables = [trainable_from_loaded(dataclasses.replace(s, controller=copy.deepcopy(s.controller))) for s in skills]
    return train_trainables(trainables, rig, config, start=start, workers=workers, progress=progress,
                            checkpoint_dir=checkpoint_dir, resume=resume)
