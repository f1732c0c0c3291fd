"""Synthetic skill libraries on a 1-DoF rig with closed-form chain success, for the chain search tests.

The rig is one coordinate x. Skill s starts when ``x >= a and x <= b``, stops with
probability ``beta`` per step (geometric duration) before ``max_steps``, and stops
uniformly anywhere in ``[c, d]`` whatever its start. So, in closed form:

- P(stop in time) = 1 - (1 - beta)^M;
- E[min(K, M)] = (1 - (1 - beta)^M) / beta (truncated geometric);
- E[gamma^K 1{K <= M}] = beta gamma (1 - ((1 - beta) gamma)^M) / (1 - (1 - beta) gamma)
  (geometric distribution; the options model of Sutton, Precup & Singh 1999, truncated at M);
- a handoff accepts the fraction |[c, d] and [a', b']| / (d - c) of the end states;

and, since the end state does not depend on the start, a chain's success is the
product of its entry fraction, every P(stop in time), every handoff fraction and the
goal fraction. ``simulate`` runs the rig episode by episode (numpy) as an
independent check of the search's particle predictions.
"""

from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from kinetome.library.planning import LinkFact, PlanProblem, StepResult
from kinetome.library.planning.links import FactCache, region_fact
from kinetome.library.predicates import parse_predicate

GAMMA = 0.99
NAMES = {"x": ()}


@dataclass(frozen=True)
class Interval:
    low: float
    high: float

    def overlap(self, other: "Interval") -> float:
        return max(0.0, min(self.high, other.high) - max(self.low, other.low))

    @property
    def width(self) -> float:
        return self.high - self.low

    def text(self) -> str:
        return f"x >= {self.low!r} and x <= {self.high!r}"


@dataclass(frozen=True, eq=False)
class SyntheticSkill:
    """A skill of the 1-DoF rig: starts in ``start``, ends uniformly in ``end``."""

    ref: str
    start: Interval
    end: Interval
    beta: float
    max_steps: int

    @property
    def starts_when(self):
        return parse_predicate(self.start.text(), NAMES, what="starts_when")

    @property
    def stops_when(self):
        return parse_predicate(self.end.text(), NAMES, what="stops_when")

    # closed form ------------------------------------------------------------
    @property
    def p_stop(self) -> float:
        return 1.0 - (1.0 - self.beta) ** self.max_steps

    @property
    def mean_steps(self) -> float:
        return self.p_stop / self.beta

    @property
    def stop_discount(self) -> float:
        b, g, m = self.beta, GAMMA, self.max_steps
        return b * g * (1.0 - ((1.0 - b) * g) ** m) / (1.0 - (1.0 - b) * g)

    # the search's model -----------------------------------------------------
    def accepts(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        x = states["x"]
        return (x >= self.start.low) & (x <= self.start.high)

    def step(self, states: Mapping[str, np.ndarray], rng: np.random.Generator) -> StepResult:
        n = len(states["x"])
        return StepResult(
            p_stop=np.full(n, self.p_stop), duration=np.full(n, self.mean_steps), stop_discount=np.full(n, self.stop_discount),
            ends={"x": rng.uniform(self.end.low, self.end.high, n)}, unknown=np.zeros(n, dtype=bool), error=0.0,
            scored_by="closed-form model",
        )


@dataclass(frozen=True, eq=False)
class SyntheticLibrary:
    skills: tuple[SyntheticSkill, ...]
    start: Interval
    goal: Interval
    decoys: tuple[str, ...]

    def by_ref(self) -> dict[str, SyntheticSkill]:
        return {s.ref: s for s in self.skills}

    def problem(self, particles: int = 4000, seed: int = 0) -> PlanProblem:
        rng = np.random.default_rng([seed, 99])
        skills = self.by_ref()
        goal = parse_predicate(self.goal.text(), NAMES, what="goal")
        bounds = {"x": (-1.0, 100.0)}

        def compute(a: str, b: str | None) -> LinkFact:
            target = goal if b is None else skills[b].starts_when
            return region_fact(skills[a].stops_when, target, declare=NAMES, bounds=bounds, source=a, target_name=b or "the goal")

        facts = FactCache(compute)
        return PlanProblem(
            skills=skills, start={"x": rng.uniform(self.start.low, self.start.high, particles)},
            in_goal=lambda s: goal.evaluate(s), link=lambda a, b: facts(a, b), goal_link=lambda a: facts(a, None),
        )

    # closed-form truth ------------------------------------------------------
    def truth(self, refs: tuple[str, ...]) -> tuple[float, float, float]:
        """(success, expected steps, E[gamma^K 1{success}]) of a chain, in closed form."""
        skills = self.by_ref()
        first = skills[refs[0]]
        reach = self.start.overlap(first.start) / self.start.width
        steps, disc = 0.0, reach
        for i, ref in enumerate(refs):
            s = skills[ref]
            steps += reach * s.mean_steps
            nxt = skills[refs[i + 1]].start if i + 1 < len(refs) else self.goal
            frac = s.end.overlap(nxt) / s.end.width
            reach *= s.p_stop * frac
            disc *= s.stop_discount * frac
        return reach, steps, disc

    @functools.lru_cache(maxsize=4)
    def enumerate(self, max_length: int) -> list[tuple[tuple[str, ...], float, float]]:
        """Every sequence up to ``max_length`` with its closed-form success and expected steps."""
        refs = [s.ref for s in self.skills]
        out = []
        for n in range(1, max_length + 1):
            for seq in itertools.product(refs, repeat=n):
                if any(a == b for a, b in zip(seq, seq[1:])):
                    continue  # a skill never follows itself (the search's rule)
                success, steps, _ = self.truth(seq)
                out.append((seq, success, steps))
        return out

    def simulate(self, refs: tuple[str, ...], episodes: int, seed: int) -> tuple[int, float]:
        """Episodes of the rig itself: (successes, mean steps run)."""
        rng = np.random.default_rng(seed)
        skills = self.by_ref()
        x = rng.uniform(self.start.low, self.start.high, episodes)
        alive = np.ones(episodes, dtype=bool)
        steps = np.zeros(episodes)
        for ref in refs:
            s = skills[ref]
            alive &= (x >= s.start.low) & (x <= s.start.high)
            k = rng.geometric(s.beta, episodes)
            steps += np.where(alive, np.minimum(k, s.max_steps), 0)
            alive &= k <= s.max_steps
            x = np.where(alive, rng.uniform(s.end.low, s.end.high, episodes), x)
        alive &= (x >= self.goal.low) & (x <= self.goal.high)
        return int(alive.sum()), float(steps.mean())


@functools.lru_cache(maxsize=16)
def random_library(seed: int, *, regions: int = 5, per_region: int = 3, decoys: int = 2) -> SyntheticLibrary:
    """Regions [r, r+1] on a line; ``per_region`` skills leave each region (branching >= 3), most move
    one or two regions up with a partial landing; decoys stop reliably and fast early but land in a
    dead-end region (``regions`` + 2) from which only unreliable skills reach the goal."""
    rng = np.random.default_rng(seed)
    skills: list[SyntheticSkill] = []
    top = regions - 1

    def region(r: float) -> Interval:
        return Interval(float(r), float(r + 1))

    for r in range(top):
        for k in range(per_region):
            to = min(top, r + int(rng.integers(1, 3)))
            lo = to + float(rng.uniform(-0.3, 0.4))
            hi = lo + float(rng.uniform(0.4, 0.9))
            skills.append(SyntheticSkill(f"s{r}{k}", region(r), Interval(lo, hi), float(rng.uniform(0.03, 0.3)), int(rng.integers(8, 40))))
    dead = regions + 2
    decoy_refs = []
    for k in range(decoys):
        ref = f"decoy{k}"
        decoy_refs.append(ref)
        skills.append(SyntheticSkill(ref, region(0), Interval(dead + 0.1, dead + 0.9), 0.9, 50))
        # from the dead end the goal is reachable, but only rarely
        skills.append(SyntheticSkill(f"trap{k}", region(dead), Interval(top + 0.2, top + 0.8), 0.004, 20))
    order = rng.permutation(len(skills))
    return SyntheticLibrary(tuple(skills[i] for i in order), region(0), Interval(top + 0.1, top + 0.9), tuple(decoy_refs))


def best_by_enumeration(lib: SyntheticLibrary, max_length: int) -> tuple[tuple[str, ...], float, float]:
    """The chain with the highest closed-form success (ties: fewer expected steps)."""
    rows = lib.enumerate(max_length)
    return max(rows, key=lambda r: (r[1], -r[2]))


def second_best_gap(lib: SyntheticLibrary, max_length: int, best: tuple[str, ...]) -> float:
    rows = sorted((r[1] for r in lib.enumerate(max_length) if r[0] != best), reverse=True)
    top = lib.truth(best)[0]
    return top - (rows[0] if rows else 0.0)


def one_step_score(skill: SyntheticSkill, start: Interval) -> float:
    return start.overlap(skill.start) / start.width * skill.p_stop
