"""The option actor-critic trainer: collect, update, log, checkpoint; resumable bit for bit.

Intra-option policies are the skills' controllers (Gaussian heads, log-prob of
the pre-clip sample, bounds re-imposed with ``project_()`` after every step),
terminations are sigmoid heads over normalised features, the critic gives
Q(s, w) for every skill and the policy over skills is epsilon-greedy on Q.
With one skill and ``episode_per_skill`` this is the flat clipped-surrogate
actor-critic used for retraining and for gymnasium sanity checks.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence, TextIO

import numpy as np
import torch

from kinetome.library.controllers.kernels import torch_threads

from kinetome.library.errors import TrainingError
from kinetome.library.runtime.learned import clock_features

from .checkpoint import (
    generator_state,
    load_checkpoint,
    load_module_tensors,
    load_optimiser_tensors,
    module_tensors,
    optimiser_tensors,
    save_checkpoint,
    set_generator_state,
)
from .config import TrainConfig, config_from_stored
from .curves import current_curve_row, save_curves
from .nets import SkillCritic, TerminationHeads
from .normaliser import ObservationNormaliser, ReturnNormaliser
from .progress import ProgressFn, as_progress
from .rollout import Collector, EpisodeStats
from .starts import StartSampler
from .trainable import TrainableSkill
from .update import check_finite_parameters, update_from_rollout

__all__ = ["OptionCriticTrainer", "TrainOutcome", "StopTraining", "torch_threads"]

# Counters that may differ between a run and its resumption.
_RESUMABLE_CHANGES = {"env_step_budget", "checkpoint_every", "log_every", "eval_every", "eval_episodes"}


class StopTraining(Exception):
    """Raise from a progress callback to stop after the current update (its checkpoint is kept)."""


@dataclass
class TrainOutcome:
    """What a run produced; the skills' controllers were trained in place."""

    rows: list[dict[str, Any]]
    steps: int
    updates: int
    completed: bool
    critic: SkillCritic
    heads: TerminationHeads | None
    obs_norm: ObservationNormaliser
    ret_norm: ReturnNormaliser
    last_stats: dict[str, float] = field(default_factory=dict)
    resumed_from: int | None = None


class OptionCriticTrainer:
    """Trains ``skills`` on ``rig`` for ``config.env_step_budget`` env steps.

    ``evaluate`` (optional) is called every ``config.eval_every`` updates and
    returns ``{"eval_success_rate": ..., "eval_return": ...}`` for the curve.
    """

    def __init__(
        self,
        skills: Sequence[TrainableSkill],
        rig: Any,
        config: TrainConfig,
        *,
        start: Any = None,
        episode_per_skill: bool,
        workers: int = 1,
        checkpoint_dir: str | Path | None = None,
        progress: ProgressFn | TextIO | None = None,
        evaluate: Callable[[], dict[str, float]] | None = None,
    ):
        if not skills:
            raise ValueError("training needs at least one skill")
        if episode_per_skill and config.deliberation_cost:
            raise ValueError(
                f"deliberation_cost must be 0 with episode_per_skill (one skill, no switches), got {config.deliberation_cost:g}"
            )
        if workers < 1:
            raise ValueError(f"workers must be >= 1, got {workers}")
        self.skills = list(skills)
        self.rig = rig
        self.config = config
        self.episode_per_skill = episode_per_skill
        self.workers = workers
        self.checkpoint_dir = None if checkpoint_dir is None else Path(checkpoint_dir)
        self.progress = as_progress(progress)
        self.evaluate = evaluate
        self.sampler = StartSampler(rig, start)
        self.np_rng = np.random.default_rng(config.seed)
        self.torch_gen = torch.Generator().manual_seed(config.seed)
        n_obs = self._n_observations()
        n_extra = clock_features(config.critic_inputs, episode_step=np.zeros(1), limit=1, phase=np.zeros(1)).shape[1]
        self.critic, self.heads = self._networks(n_obs + n_extra)
        self.obs_norm = ObservationNormaliser(n_obs)
        self.ret_norm = ReturnNormaliser(config.parallel_envs, gamma=config.gamma)
        params = [p for s in self.skills for p in s.trainable_parameters()] + list(self.critic.parameters())
        self.optimiser = torch.optim.Adam(params, lr=config.learning_rate, eps=1e-5)
        self.term_optimiser = torch.optim.Adam(self.heads.parameters(), lr=config.stop_lr) if self.heads else None
        self.collector = Collector(
            rig=rig, skills=self.skills, config=config, sampler=self.sampler, episode_per_skill=episode_per_skill,
            nthread=workers, critic=self.critic, heads=self.heads, obs_norm=self.obs_norm, ret_norm=self.ret_norm,
            np_rng=self.np_rng, torch_gen=self.torch_gen,
        )
        self.rows: list[dict[str, Any]] = []
        self.update_index = 0
        self.steps = 0
        self.resumed_from: int | None = None

    def _networks(self, n_obs: int) -> tuple[SkillCritic, TerminationHeads | None]:
        """Critic and (unless stops are registered or the mode is flat) termination heads, seeded by ``config.seed``."""
        cfg = self.config
        with torch.random.fork_rng(devices=[]):
            torch.manual_seed(cfg.seed)
            critic = SkillCritic(n_obs, len(self.skills), cfg.critic_hidden)
            if self.episode_per_skill or cfg.stop_mode == "registered":
                return critic, None
            return critic, TerminationHeads(n_obs, len(self.skills), cfg.stop_hidden, init_logit=cfg.stop_init_logit)

    def _n_observations(self) -> int:
        from kinetome.library.runtime.sim import SimBatch

        sim = SimBatch(self.rig, 1)
        qpos, qvel = self.sampler.sample(np.random.default_rng(0), 1)
        sim.reset(qpos, qvel)
        return int(np.asarray(self.rig.observe(sim.state())).shape[1])

    # ----- checkpoints --------------------------------------------------------

    def _modules(self) -> dict[str, torch.nn.Module]:
        out: dict[str, torch.nn.Module] = {f"skill{k}": s.controller for k, s in enumerate(self.skills)}
        out["critic"] = self.critic
        if self.heads is not None:
            out["heads"] = self.heads
        return out

    def _state(self) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
        tensors: dict[str, np.ndarray] = {}
        for label, module in self._modules().items():
            tensors.update(module_tensors(label, module))
        opt_t, opt_groups = optimiser_tensors("opt", self.optimiser)
        tensors.update(opt_t)
        term_groups = None
        if self.term_optimiser is not None:
            t_t, term_groups = optimiser_tensors("topt", self.term_optimiser)
            tensors.update(t_t)
        tensors.update(self.obs_norm.tensors("obs"))
        tensors.update(self.ret_norm.tensors("ret"))
        tensors.update(self.collector.carry_tensors())
        tensors["rng.torch"] = generator_state(self.torch_gen)
        meta = {
            "update": self.update_index,
            "steps": self.steps,
            "rows": self.rows,
            "numpy_rng": self.np_rng.bit_generator.state,
            "opt_groups": opt_groups,
            "term_groups": term_groups,
            "config": self.config.as_dict(),
            "skills": [s.name for s in self.skills],
            "env": self.rig.env_id,
            "episode_per_skill": self.episode_per_skill,
        }
        return tensors, meta

    def _save(self) -> None:
        if self.checkpoint_dir is None:
            return
        tensors, meta = self._state()
        save_checkpoint(self.checkpoint_dir, update=self.update_index, tensors=tensors, meta=json.loads(json.dumps(meta, default=_jsonable)))

    def _restore(self) -> bool:
        assert self.checkpoint_dir is not None
        loaded = load_checkpoint(self.checkpoint_dir)
        if loaded is None:
            return False
        tensors, meta = loaded
        if "method" in meta:  # a parameter search's checkpoint
            raise TrainingError(
                f"checkpoint in {self.checkpoint_dir} was made by the {meta['method']} parameter search, got a resume with the "
                "actor-critic; resume with --method search, or start over in a new folder"
            )
        mine = self.config.as_dict()
        theirs = config_from_stored(meta["config"], source=str(self.checkpoint_dir)).as_dict()
        changed = sorted(k for k in mine if k not in _RESUMABLE_CHANGES and theirs.get(k) != mine[k])
        if changed or meta["skills"] != [s.name for s in self.skills] or meta["env"] != self.rig.env_id:
            what = ", ".join(f"{k}: {theirs.get(k)!r} -> {mine[k]!r}" for k in changed) or "skills or env"
            raise TrainingError(
                f"resume must use the settings the checkpoint in {self.checkpoint_dir} was made with, got changes ({what}); "
                "use the original config, or a new checkpoint_dir to start over"
            )
        for label, module in self._modules().items():
            load_module_tensors(label, module, tensors)
        load_optimiser_tensors("opt", self.optimiser, tensors, meta["opt_groups"])
        if self.term_optimiser is not None:
            load_optimiser_tensors("topt", self.term_optimiser, tensors, meta["term_groups"])
        self.obs_norm.load(tensors, "obs")
        self.ret_norm.load(tensors, "ret")
        self.collector.load_carry(tensors)
        set_generator_state(self.torch_gen, tensors["rng.torch"])
        self.np_rng.bit_generator.state = meta["numpy_rng"]
        self.rows = [current_curve_row(row) for row in meta["rows"]]  # checkpoints may hold old column names
        self.update_index = int(meta["update"])
        self.steps = int(meta["steps"])
        self.resumed_from = self.update_index
        return True

    # ----- the loop -----------------------------------------------------------

    def run(self, *, resume: bool = False) -> TrainOutcome:
        """Train to the budget (or continue a checkpointed run with ``resume=True``)."""
        from kinetome.library.controllers.kernels import blas_products

        with torch_threads(1), blas_products():
            return self._run(resume)

    def _run(self, resume: bool) -> TrainOutcome:
        self._begin(resume)
        cfg = self.config
        total_updates = cfg.updates
        completed = True
        stats = EpisodeStats().summary()
        clock = (time.perf_counter(), self.steps)
        try:
            while self.update_index < total_updates:
                row, stats = self._update_once(total_updates, clock)
                if cfg.checkpoint_every and (self.update_index % cfg.checkpoint_every == 0 or self.update_index == total_updates):
                    self._save()
                if not self._report(row, total_updates):
                    completed = self.update_index >= total_updates
                    break
        except TrainingError as exc:
            raise TrainingError(f"{exc} [{self._checkpoint_note()}]") from exc
        return TrainOutcome(
            rows=self.rows, steps=self.steps, updates=self.update_index, completed=completed, critic=self.critic,
            heads=self.heads, obs_norm=self.obs_norm, ret_norm=self.ret_norm, last_stats=stats,
            resumed_from=self.resumed_from,
        )

    def _begin(self, resume: bool) -> None:
        """Restore the checkpoint (``resume``), refuse to overwrite one otherwise, or start fresh episodes."""
        if self.checkpoint_dir is not None:
            if resume and self._restore():
                return
            if not resume and load_checkpoint(self.checkpoint_dir) is not None:
                raise TrainingError(
                    f"checkpoint_dir {self.checkpoint_dir} already holds a checkpoint; "
                    "pass resume=True to continue it, or choose an empty folder"
                )
        self.collector.start()

    def _update_once(self, total_updates: int, clock: tuple[float, int]) -> tuple[dict[str, Any], dict[str, float]]:
        """Collect one rollout, update on it; return the curve row and the rollout's episode statistics."""
        cfg = self.config
        u = self.update_index
        lr = cfg.learning_rate * (1.0 - u / total_updates) if cfg.learning_rate_schedule == "linear" else cfg.learning_rate
        for group in self.optimiser.param_groups:
            group["lr"] = lr
        rollout = self.collector.collect()
        stats = self.collector.stats.summary()
        info = update_from_rollout(
            rollout, skills=self.skills, critic=self.critic, heads=self.heads, optimiser=self.optimiser,
            term_optimiser=self.term_optimiser, config=cfg, generator=self.torch_gen, update_index=u + 1,
        )
        check_finite_parameters(self._modules(), where=f"after update {u + 1}")
        self.update_index = u + 1
        self.steps += cfg.batch_size
        elapsed = time.perf_counter() - clock[0]
        row: dict[str, Any] = {
            "update": self.update_index,
            "env_steps": self.steps,
            **{k: stats[k] for k in ("episodes", "return_mean", "success_rate", "mean_duration", "stop_rate", "mean_skill_duration")},
            **{k: info.get(k) for k in ("policy_loss", "value_loss", "termination_loss", "entropy", "approx_kl", "clip_fraction", "explained_variance")},
            "learning_rate": lr,
            "steps_per_s": (self.steps - clock[1]) / elapsed if elapsed > 0 else float("nan"),
        }
        if self.evaluate is not None and cfg.eval_every and self.update_index % cfg.eval_every == 0:
            row.update(self.evaluate())
        self.rows.append(row)
        return row, stats

    def _report(self, row: dict[str, Any], total_updates: int) -> bool:
        """Send the row to the progress callback when due; False when it asked to stop."""
        cfg = self.config
        if self.progress is None or not (self.update_index % cfg.log_every == 0 or self.update_index == total_updates):
            return True
        try:
            self.progress({**row, "updates": total_updates, "total_steps": total_updates * cfg.batch_size})
        except StopTraining:
            return False
        return True

    def _checkpoint_note(self) -> str:
        if self.checkpoint_dir is None:
            return "no checkpoint_dir was given, so nothing was saved"
        loaded = (self.checkpoint_dir / "checkpoint.json").exists()
        if not loaded:
            return f"no checkpoint was written yet in {self.checkpoint_dir}"
        meta = json.loads((self.checkpoint_dir / "checkpoint.json").read_text())
        return f"the last good checkpoint (update {meta['update']}) is kept in {self.checkpoint_dir}"

    def save_curves(self, directory: str | Path, *, stem: str = "curves", title: str = "training") -> tuple[Path, Path]:
        return save_curves(self.rows, directory, stem=stem, title=title)


def _jsonable(value: Any) -> Any:
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"cannot store {type(value).__name__} in checkpoint JSON")
