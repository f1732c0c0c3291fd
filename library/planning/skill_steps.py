"""A stored skill as the chain search sees it: option models where they are valid, simulation elsewhere.

Option models answer a step only when they were fitted on this task (env and
variant digest, this version: ``checker.model_method.task_models``) and at least
95% of the starts lie inside their fitted support (the checker's rule); starts
outside count as failures, and the step's stated error is the models' held-out
error on the same question (does the skill end well?). Elsewhere the step is
measured: the skill runs in MuJoCo from the particles' own states.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .search import StepResult

__all__ = ["LibrarySkill", "raw_state"]


def raw_state(rig: Any, states: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray] | None:
    """(qpos, qvel) of named states when the layout's ``qpos``/``qvel`` are the whole raw state, else None."""
    src_q, src_v = rig.sources.get("qpos"), rig.sources.get("qvel")
    if src_q is None or src_v is None or "qpos" not in states or "qvel" not in states:
        return None
    if tuple(src_q.index) != tuple(range(rig.model.nq)) or tuple(src_v.index) != tuple(range(rig.model.nv)):
        return None
    return np.asarray(states["qpos"], dtype=np.float64), np.asarray(states["qvel"], dtype=np.float64)


@dataclass(eq=False)
class LibrarySkill:
    """One loaded version on the search's task: ``accepts`` is its ``starts_when``; ``step`` predicts one run."""

    loaded: Any  # runtime LoadedSkill, built for the task's rig
    rig: Any
    models: Any = None  # checker TaskModels valid for this task, or None
    why_no_models: str = ""
    seed: int = 0
    confidence: float = 0.95
    gamma: float = 0.99
    _error: float | None = field(default=None, repr=False)
    simulated_steps: int = 0

    @property
    def ref(self) -> str:
        return self.loaded.ref

    def accepts(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.asarray(self.loaded.starts_when.evaluate({**states, **self.loaded.parameters}), dtype=bool)

    def step(self, states: Mapping[str, np.ndarray], rng: np.random.Generator) -> StepResult:
        if self.models is not None:
            from ..checker.model_method import MAX_UNSUPPORTED

            outside = ~self.models.models.support.inside(states)
            if float(np.mean(outside)) <= MAX_UNSUPPORTED and all(q in states for q in self.models.models.features):
                return self._model_step(states, outside, rng)
            why = f"simulation ({100 * np.mean(outside):.0f}% of its starts lie outside the support of {self.models.artifact})"
            return self._sim_step(states, why)
        return self._sim_step(states, f"simulation ({self.why_no_models or 'no option models fitted on this task'})")

    def held_out_error(self, rng: np.random.Generator) -> float:
        """The models' error on "does this skill stop?", replayed on their held-out episodes (checker's rule)."""
        if self._error is None:
            from ..checker.model_method import held_out_error

            self._error = held_out_error(self.models, self.loaded, None, False, confidence=self.confidence, rng=rng)
        return self._error

    def _model_step(self, states: Mapping[str, np.ndarray], outside: np.ndarray, rng: np.random.Generator) -> StepResult:
        from ..checker.model_method import stopped_end_states

        models = self.models.models
        pred = models.duration.predict(states)
        if models.end_state is None:  # it never stopped while fitted: no stop state to hand over (only the outcome floor)
            n = len(next(iter(states.values())))
            drawn, failed = {}, np.ones(n, dtype=bool)
        else:
            drawn, failed = stopped_end_states(models, self.loaded, dict(states), rng)
        ends = {k: v for k, v in drawn.items() if k in states}
        return StepResult(
            p_stop=np.asarray(pred["p_stopped"], dtype=np.float64), duration=np.asarray(pred["duration"], dtype=np.float64),
            stop_discount=np.asarray(pred["stop_discount"], dtype=np.float64), ends=ends, unknown=outside | failed,
            error=self.held_out_error(np.random.default_rng([self.seed, 104729])), scored_by=f"option models {self.models.artifact}",
        )

    def _sim_step(self, states: Mapping[str, np.ndarray], why: str) -> StepResult:
        from ..runtime.execute import run_chain
        from ..runtime.records import EndReason

        raw = raw_state(self.rig, states)
        n = len(next(iter(states.values())))
        if raw is None:
            return StepResult(np.zeros(n), np.zeros(n), np.zeros(n), {}, np.ones(n, dtype=bool), 0.0,
                              "not scored: no option models valid here and the state cannot be simulated")
        rollout = run_chain([self.loaded], self.rig, starts=raw, seed=self.seed, gamma=self.gamma, episode_ids=np.arange(n))
        seg = rollout.segments[0]
        self.simulated_steps += int(seg.steps.sum())
        stopped = seg.reason == int(EndReason.STOPPED)
        ends = {k: np.asarray(v) for k, v in seg.end_state.items() if k in states}
        return StepResult(
            p_stop=stopped.astype(np.float64), duration=seg.steps.astype(np.float64), stop_discount=np.where(stopped, seg.discount, 0.0),
            ends=ends, unknown=np.zeros(n, dtype=bool), error=0.0, scored_by=why,
        )
