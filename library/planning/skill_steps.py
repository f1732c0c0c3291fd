"""A stored skill as the chain search sees it: option models where they are valid, simulation elsewhere.

Option models answer a step whenever they were fitted on this task (env and
variant digest, this version: ``checker.model_method.task_models``); starts outside
their fitted support are not answered and count as failures (the checker's rule for
the lower bound), so the search never runs MuJoCo for a skill whose models are valid
here: simulation is the confirmation's job. The step's stated error is the models'
held-out error on the same question (does the skill end well?). A skill without
valid models is measured: it runs in MuJoCo from the particles' own states, once per
distinct set of start states (the result is kept for the run).
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
    _measured: dict[bytes, StepResult] = field(default_factory=dict, repr=False)
    simulated_steps: int = 0

    @property
    def ref(self) -> str:
        return self.loaded.ref

    def accepts(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.asarray(self.loaded.starts_when.evaluate({**states, **self.loaded.parameters}), dtype=bool)

    def step(self, states: Mapping[str, np.ndarray], rng: np.random.Generator) -> StepResult:
        if self.models is not None and all(q in states for q in self.models.models.features):
            return self._model_step(states, ~self.models.models.support.inside(states), rng)
        why = self.why_no_models or "no option models fitted on this task"
        if self.models is not None:
            why = f"the particles lack quantities {self.models.artifact} reads"
        return self._sim_step(states, f"simulation ({why})")

    def held_out_error(self, rng: np.random.Generator) -> float:
        """The models' error on "does this skill stop?", replayed on their held-out episodes (checker's rule)."""
        if self._error is None:
            from ..checker.model_method import held_out_error

            self._error = held_out_error(self.models, self.loaded, None, False, confidence=self.confidence, rng=rng)
        return self._error

    def _model_step(self, states: Mapping[str, np.ndarray], outside: np.ndarray, rng: np.random.Generator) -> StepResult:
        """Models on the starts inside their support; the others are unknown (failures), never simulated."""
        from ..checker.model_method import stopped_end_states

        models = self.models.models
        n = outside.size
        rows = np.flatnonzero(~outside)
        p_stop, duration, discount = np.zeros(n), np.zeros(n), np.zeros(n)
        unknown = outside.copy()
        ends: dict[str, np.ndarray] = {}
        if rows.size:
            inside = {k: np.asarray(v)[rows] for k, v in states.items()}
            pred = models.duration.predict(inside)
            p_stop[rows], duration[rows], discount[rows] = pred["p_stopped"], pred["duration"], pred["stop_discount"]
            if models.end_state is None:  # it never stopped while fitted: no stop state to hand over (only the outcome floor)
                unknown[rows] = True
            else:
                drawn, failed = stopped_end_states(models, self.loaded, inside, rng)
                unknown[rows] = failed
                for k, v in drawn.items():
                    if k in states:
                        ends[k] = np.array(states[k], dtype=np.float64, copy=True)
                        ends[k][rows] = v
        share = f"; {100 * np.mean(outside):.0f}% of its starts outside their support count as failures" if outside.any() else ""
        return StepResult(
            p_stop=p_stop, duration=duration, stop_discount=discount, ends=ends, unknown=unknown,
            error=self.held_out_error(np.random.default_rng([self.seed, 104729])), scored_by=f"option models {self.models.artifact}{share}",
        )

    def _sim_step(self, states: Mapping[str, np.ndarray], why: str) -> StepResult:
        """Run the skill in MuJoCo from these states; the same states are run once per skill (kept by content)."""
        import hashlib

        digest = hashlib.sha256(b"".join(np.ascontiguousarray(states[k], dtype=np.float64).tobytes() + k.encode() for k in sorted(states))).digest()
        if digest not in self._measured:
            self._measured[digest] = self._simulate(states, why)
        return self._measured[digest]

    def _simulate(self, states: Mapping[str, np.ndarray], why: str) -> StepResult:
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
