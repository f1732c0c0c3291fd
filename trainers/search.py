"""Parameter-space search for structured skills: CMA-ES over a skill's bounded parameters.

For kinds with a handful of bounded, interpretable parameters (PD gains and
setpoints, an oscillator's frequency, amplitudes and phases) per-step action
noise explores poorly; searching the parameters directly works better. The
search runs in the unit cube: each parameter is mapped linearly from its
spec bounds to [0, 1], so every candidate respects the bounds (``cma``'s
bound transform) and the initial step size is a fraction of each range.

Each generation evaluates every candidate on the same episodes: the same
start states and, as everywhere in the runtime, mean actions (common random
numbers, so candidates are compared on equal terms), batched through
``run_skill``. Fitness is the flat-mode objective: task return plus
``success_bonus`` when the skill's ``stops_when`` ends the episode.

Checkpoints keep the fitness of every evaluated candidate; resuming rebuilds
the search from its seed and replays those values (no episode is run again),
which gives the same state bit for bit, checked against the stored mean.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np

from kinetome.library.errors import InvalidInputError, TrainingError

from .checkpoint import load_checkpoint, save_checkpoint
from .curves import current_curve_row
from .config import TrainConfig, config_from_stored
from .progress import ProgressFn, as_progress

__all__ = ["SearchSpace", "search_space", "ParameterSearch", "SearchOutcome", "METHOD"]

METHOD = "cma-es"  # the name lineage and progress give this method
FINAL_STARTS = 1_000_002  # start-state stream of the final choice: past any generation number a search reaches
_RESUMABLE_CHANGES = {"env_step_budget", "checkpoint_every", "log_every", "eval_every", "eval_episodes"}


@dataclass(frozen=True)
class SearchSpace:
    """The searched parameters (name, shape) and their bounds, flattened in declaration order."""

    names: tuple[str, ...]
    shapes: tuple[tuple[int, ...], ...]
    low: np.ndarray
    high: np.ndarray

    @property
    def size(self) -> int:
        return int(self.low.size)

    def encode(self, values: dict[str, np.ndarray]) -> np.ndarray:
        """Parameter values -> unit-cube coordinates (d,)."""
        flat = np.concatenate([np.asarray(values[n], dtype=np.float64).ravel() for n in self.names])
        return np.clip((flat - self.low) / (self.high - self.low), 0.0, 1.0)

    def decode(self, x: np.ndarray) -> dict[str, np.ndarray]:
        """Unit-cube coordinates -> parameter values, clipped into the bounds."""
        flat = self.low + np.clip(np.asarray(x, dtype=np.float64), 0.0, 1.0) * (self.high - self.low)
        out, i = {}, 0
        for name, shape in zip(self.names, self.shapes):
            size = int(np.prod(shape)) if shape else 1
            out[name] = flat[i : i + size].reshape(shape)
            i += size
        return out


def search_space(controller: Any, *, frozen: tuple[str, ...] = ()) -> SearchSpace:
    """The controller's trainable parameters except ``frozen`` and the exploration noise (``log_std``).

    Every searched parameter needs finite bounds with low < high (the search works inside them).
    """
    bounds = controller.parameter_bounds()
    names, shapes, lows, highs, bad = [], [], [], [], []
    for decl in controller.declarations:
        if decl.name in frozen or decl.name == "log_std" or not getattr(decl, "trainable", True):
            continue
        low, high = (np.broadcast_to(np.asarray(b, dtype=np.float64), decl.shape).ravel() for b in bounds[decl.name])
        if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high)) and np.all(high > low)):
            bad.append(decl.name)
            continue
        names.append(decl.name)
        shapes.append(tuple(decl.shape))
        lows.append(low)
        highs.append(high)
    if bad:
        raise InvalidInputError(
            f"search needs finite bounds with low < high for every searched parameter, got none for {bad}; "
            "give them bounds in the spec, or retrain with --method actor-critic"
        )
    if not names:
        raise InvalidInputError("search needs at least one parameter to move, got none (all are fixed by the predicates)")
    return SearchSpace(tuple(names), tuple(shapes), np.concatenate(lows), np.concatenate(highs))


@dataclass
class SearchOutcome:
    """What a search produced: the final mean's parameters, curve rows and the budget used."""

    parameters: dict[str, np.ndarray]
    rows: list[dict[str, Any]]
    steps: int
    generations: int
    completed: bool
    resumed_from: int | None = None
    history: list[np.ndarray] = field(default_factory=list)  # fitness per generation
    finalists: list[dict[str, Any]] = field(default_factory=list)  # the final choice's scores (search_finalists > 1)


class ParameterSearch:
    """CMA-ES on one skill (a ``LoadedSkill``), flat-mode episodes, until ``config.env_step_budget`` env steps.

    The skill's controller is moved in place; the caller passes a copy.
    """

    def __init__(self, skill: Any, rig: Any, config: TrainConfig, *, start: Any = None, frozen: tuple[str, ...] = (),
                 workers: int = 1, checkpoint_dir: str | Path | None = None, progress: ProgressFn | TextIO | None = None,
                 evaluate: Any = None):
        self.skill, self.rig, self.config = skill, rig, config
        self.start, self.workers = start, workers
        self.space = search_space(skill.controller, frozen=frozen)
        self.checkpoint_dir = None if checkpoint_dir is None else Path(checkpoint_dir)
        self.progress = as_progress(progress)
        self.evaluate = evaluate
        self.x0 = self.space.encode(skill.controller.parameter_values())
        self.best_seen: list[tuple[float, np.ndarray]] = []  # (score, x) of the best candidates so far, best first

    # ----- the search itself ----------------------------------------------------

    def _strategy(self) -> Any:
        import cma

        rng = np.random.default_rng([self.config.seed, 0xC3A])
        opts = {
            "bounds": [0.0, 1.0],
            "seed": math.nan,  # leave numpy's global generator alone: draws come from ``randn`` below
            "randn": lambda lam, n: rng.standard_normal((lam, n)),
            "verbose": -9,
            "verb_disp": 0,
            "verb_log": 0,
            "maxiter": math.inf,
            "tolfun": 0.0,
            "tolx": 0.0,
            "tolfunhist": 0.0,
            "tolstagnation": math.inf,
        }
        if self.config.search_population:
            opts["popsize"] = int(self.config.search_population)
        return cma.CMAEvolutionStrategy(self.x0, self.config.search_step_size, opts)

    def _episodes(self, generation: int) -> tuple[np.ndarray, np.ndarray]:
        """The generation's start states, shared by every candidate (common random numbers)."""
        from kinetome.library.runtime.starts import sample_starts

        return sample_starts(self.rig, self.start, self.config.search_episodes, seed=self.config.seed * 1_000_003 + generation)

    def apply(self, x: np.ndarray) -> None:
        """Put candidate ``x`` into the skill's controller (the parameters not searched keep their values)."""
        values = self.skill.controller.parameter_values()
        values.update(self.space.decode(x))
        self.skill.controller.load_values(values)

    def fitness(self, x: np.ndarray, starts: tuple[np.ndarray, np.ndarray]) -> tuple[float, dict[str, float]]:
        """Mean flat-mode return of candidate ``x`` on ``starts`` (higher is better) and its episode numbers."""
        from kinetome.library.runtime.execute import run_skill
        from kinetome.library.runtime.records import EndReason

        self.apply(x)
        seg = run_skill(self.skill, self.rig, starts=starts, seed=0, workers=self.workers, gamma=self.config.gamma).segments[0]
        success = seg.reason == int(EndReason.STOPPED)
        returns = seg.reward + self.config.success_bonus * success
        return float(np.mean(returns)), {"steps": int(seg.steps.sum()), "success": float(np.mean(success)),
                                         "length": float(np.mean(seg.steps)), "return": float(np.mean(seg.reward))}

    def _generation(self, es: Any, generation: int) -> tuple[np.ndarray, dict[str, Any]]:
        candidates = es.ask()
        starts = self._episodes(generation)
        scores, infos = zip(*(self.fitness(np.asarray(x), starts) for x in candidates))
        fit = -np.asarray(scores, dtype=np.float64)  # cma minimises
        self._remember(candidates, fit)
        es.tell(candidates, fit.tolist())
        info = {
            "steps": sum(i["steps"] for i in infos),
            "episodes": len(candidates) * self.config.search_episodes,
            "return_mean": float(np.mean([i["return"] for i in infos])),
            "success_rate": float(np.mean([i["success"] for i in infos])),
            "mean_duration": float(np.mean([i["length"] for i in infos])),
            "best_fitness": float(np.max(scores)),
            "sigma": float(es.sigma),
        }
        return fit, info

    # ----- checkpoints --------------------------------------------------------------

    def _save(self, es: Any, history: list[np.ndarray], steps: int, rows: list[dict[str, Any]]) -> None:
        if self.checkpoint_dir is None:
            return
        tensors = {"search.mean": np.asarray(es.mean, dtype=np.float64)}
        for g, fit in enumerate(history):
            tensors[f"search.fitness.{g:06d}"] = fit
        meta = {"method": METHOD, "generation": len(history), "steps": steps, "rows": rows, "config": self.config.as_dict(),
                "skill": self.skill.ref, "env": self.rig.env_id, "space": list(self.space.names)}
        save_checkpoint(self.checkpoint_dir, update=len(history), tensors=tensors, meta=_jsonable(meta))

    def _restore(self) -> tuple[Any, list[np.ndarray], int, list[dict[str, Any]]] | None:
        loaded = load_checkpoint(self.checkpoint_dir)
        if loaded is None:
            return None
        tensors, meta = loaded
        if meta.get("method") != METHOD:
            raise TrainingError(
                f"checkpoint in {self.checkpoint_dir} was made by the actor-critic, got a resume with the {METHOD} search; "
                "resume with --method actor-critic, or start over in a new folder"
            )
        theirs = config_from_stored(meta["config"], source=str(self.checkpoint_dir)).as_dict()
        mine = self.config.as_dict()
        changed = sorted(k for k in mine if k not in _RESUMABLE_CHANGES and theirs.get(k) != mine[k])
        if meta.get("method") != METHOD or changed or meta["skill"] != self.skill.ref or meta["space"] != list(self.space.names):
            what = ", ".join(f"{k}: {theirs.get(k)!r} -> {mine[k]!r}" for k in changed) or "method, skill or parameters"
            raise TrainingError(
                f"resume must use the settings the checkpoint in {self.checkpoint_dir} was made with, got changes ({what}); "
                "use the original config, or a new folder to start over"
            )
        es = self._strategy()
        history = [tensors[f"search.fitness.{g:06d}"] for g in range(int(meta["generation"]))]
        self.best_seen = []
        for fit in history:  # replay: the same draws and the same values give the same state (and the same best seen)
            candidates = es.ask()
            self._remember(candidates, fit)
            es.tell(candidates, fit.tolist())
        if not np.array_equal(np.asarray(es.mean, dtype=np.float64), tensors["search.mean"]):
            raise TrainingError(f"checkpoint in {self.checkpoint_dir} does not replay to its stored state; start over in a new folder")
        return es, history, int(meta["steps"]), [current_curve_row(row) for row in meta["rows"]]

    # ----- the loop --------------------------------------------------------------------

    def run(self, *, resume: bool = False) -> SearchOutcome:
        """Search until the env-step budget is used (or continue a checkpointed search with ``resume=True``)."""
        from kinetome.library.controllers.kernels import torch_threads

        with torch_threads(1):
            return self._run(resume)

    def _begin(self, resume: bool) -> tuple[Any, list[np.ndarray], int, list[dict[str, Any]], int | None]:
        if self.checkpoint_dir is not None:
            restored = self._restore() if resume else None
            if restored is not None:
                return (*restored, len(restored[1]))
            if not resume and load_checkpoint(self.checkpoint_dir) is not None:
                raise TrainingError(f"checkpoint_dir {self.checkpoint_dir} already holds a checkpoint; "
                                    "pass resume=True to continue it, or choose an empty folder")
        return self._strategy(), [], 0, [], None

    def _run(self, resume: bool) -> SearchOutcome:
        cfg = self.config
        es, history, steps, rows, resumed_from = self._begin(resume)
        completed, clock, reserve = True, (time.perf_counter(), steps), 0.0
        while steps + reserve < cfg.env_step_budget:
            fit, info = self._generation(es, len(history))
            reserve = self._final_reserve(info["mean_duration"])
            history.append(fit)
            steps += info.pop("steps")
            elapsed = time.perf_counter() - clock[0]
            row = {"update": len(history), "env_steps": steps, **info,
                   "steps_per_s": (steps - clock[1]) / elapsed if elapsed > 0 else float("nan")}
            if self.evaluate is not None and cfg.eval_every and len(history) % cfg.eval_every == 0:
                self.apply(es.mean)
                row.update(self.evaluate())
            rows.append(row)
            done = steps + reserve >= cfg.env_step_budget
            if cfg.checkpoint_every and (len(history) % cfg.checkpoint_every == 0 or done):
                self._save(es, history, steps, rows)
            if not self._report(row, steps):
                completed = done
                break
        final, finals = np.asarray(es.mean, dtype=np.float64), []
        if completed and cfg.search_finalists > 1:
            final, finals, used = self._select_final(final)
            steps += used
        self.apply(final)
        return SearchOutcome(self.space.decode(final), rows, steps, len(history), completed, resumed_from, history, finals)

    # ----- the final choice -------------------------------------------------------------

    def _remember(self, candidates: list, fit: np.ndarray) -> None:
        """Keep the ``search_finalists - 1`` best candidates seen (by their generation's score) for the final choice."""
        keep = self.config.search_finalists - 1
        if keep <= 0:
            return
        pool = self.best_seen + [(-float(f), np.asarray(x, dtype=np.float64)) for f, x in zip(fit, candidates)]
        self.best_seen = sorted(pool, key=lambda item: -item[0])[:keep]  # stable: earlier candidates win ties

    def _final_reserve(self, mean_length: float) -> float:
        """Env steps held back for the final choice, estimated from the last generation's episode length."""
        if self.config.search_finalists <= 1:
            return 0.0
        return float(self.config.search_finalists * self.config.search_final_episodes * mean_length)

    def _select_final(self, mean: np.ndarray) -> tuple[np.ndarray, list[dict[str, Any]], int]:
        """Score the final mean and the best candidates seen on the same fresh episodes; keep the best.

        A generation scores each candidate on a few episodes, so the best of them are partly lucky and the
        final mean may sit between good candidates without being one; more episodes decide. Ties keep the mean.
        """
        cfg = self.config
        from kinetome.library.runtime.starts import sample_starts

        starts = sample_starts(self.rig, self.start, cfg.search_final_episodes, seed=cfg.seed * 1_000_003 + FINAL_STARTS)
        finalists = [("final mean", mean)] + [(f"best seen {i + 1}", x) for i, (_, x) in enumerate(self.best_seen)]
        rows, used, best = [], 0, (-math.inf, mean)
        for label, x in finalists:
            score, info = self.fitness(x, starts)
            used += info["steps"]
            rows.append({"finalist": label, "score": score, "success_rate": info["success"], "episodes": cfg.search_final_episodes})
            if score > best[0]:
                best = (score, x)
        return best[1], rows, used

    def _report(self, row: dict[str, Any], steps: int) -> bool:
        from .option_critic import StopTraining

        if self.progress is None or row["update"] % self.config.log_every:
            return True
        try:
            self.progress({**row, "total_steps": self.config.env_step_budget, "method": METHOD})
        except StopTraining:
            return False
        return True


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return float(value)
    return value
