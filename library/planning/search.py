"""Chain search over skill models: lazy best-first search with a depth limit and a time budget.

Pure numpy: no store, no CLI, no MuJoCo. A *candidate* is a sequence of skills whose
first skill accepts the start, whose handoffs compose and whose last stop region
reaches the goal. The search carries a fixed set of particles (start states) through
each prefix: per particle, the probability ``mass`` that everything so far went well
(accepted, stopped in time), its end state, and the expected discount so far.

Scores of a prefix, from the skills' models (SMDP composition of option models):

- ``success``: mean particle mass, the predicted probability of getting here;
- ``steps``: expected env steps run so far (sum over skills of E[mass * duration]);
- ``discounted``: E[gamma^K 1{success}] so far.

Extending a prefix never raises ``success`` and never lowers ``steps`` (the same
particles continue), so the key (success rounded down to ``success_tolerance``,
then steps) is an optimistic bound for every extension, and candidates leave the
queue best first. Children are scored only when they reach the front of the queue
(lazy evaluation: pushed with the parent's key, which bounds theirs).

A skill never follows itself (it would start where its own stop put it), and a
prefix whose last stop region is proved to lie in the goal is not extended (every
extension is dominated). The pair fact of a handoff (``link``: stored evidence that it
breaks, or a proof that A's stop region lies inside B's initiation set or never meets
it) is asked before the child is queued and prunes it; facts are kept per pair for the
run. A skill that would end the chain at the depth limit is not tried when its stop
region never meets the goal (``quick_goal_link``: a fact that needs no solver). For the
goal, the pair fact decides first: ``proved`` (every stop state of the last skill lies
in the goal: no goal test, and no extension), ``impossible`` (never tried), else measured.
"""

from __future__ import annotations

import heapq
import math
import time
from dataclasses import dataclass, field, replace
from typing import Any, Callable, Mapping, Protocol, Sequence

import numpy as np

__all__ = [
    "PROVED",
    "IMPOSSIBLE",
    "BROKEN",
    "OPEN",
    "LinkFact",
    "StepResult",
    "SkillModel",
    "PlanProblem",
    "SearchSettings",
    "Particles",
    "Candidate",
    "Failure",
    "SearchResult",
    "search_chains",
    "score_sequence",
]

PROVED = "proved"  # containment proved: every stop state of A is accepted by B (or lies in the goal)
IMPOSSIBLE = "impossible"  # no state lies in both: A can never hand over to B (or reach the goal)
BROKEN = "broken"  # stored check results on this task say the handoff breaks
OPEN = "open"  # neither: measured on the particles
GOAL = "goal"  # the pseudo skill at the end of a candidate


@dataclass(frozen=True)
class LinkFact:
    """What is known about a handoff A -> B (or A -> goal) before measuring it, and why."""

    status: str
    reason: str = ""


@dataclass(frozen=True, eq=False)
class StepResult:
    """One skill run from a batch of start states (B particles).

    ``p_stop``: probability of stopping by its own condition in time; ``duration``:
    expected steps; ``stop_discount``: E[gamma^k 1{stopped}]; ``ends``: end states
    given a stop; ``unknown``: starts the models could not answer (counted as
    failures); ``error``: stated error of this step's success (models' held-out
    error; 0 for a simulation); ``scored_by``: what produced it.
    """

    p_stop: np.ndarray
    duration: np.ndarray
    stop_discount: np.ndarray
    ends: Mapping[str, np.ndarray]
    unknown: np.ndarray
    error: float
    scored_by: str


class SkillModel(Protocol):
    """A skill as the search sees it: its initiation test and a way to predict one run."""

    ref: str

    def accepts(self, states: Mapping[str, np.ndarray]) -> np.ndarray: ...

    def step(self, states: Mapping[str, np.ndarray], rng: np.random.Generator) -> StepResult: ...


@dataclass(frozen=True, eq=False)
class PlanProblem:
    """Skills (ref -> model, in order), start states, the goal test and the pair facts.

    ``link(a, b)`` gives the fact about handoff a -> b, asked for every handoff the search
    scores (keep it cheap); ``goal_link(a)`` about a's stop region and the goal, asked once
    per skill that ends a scored prefix. ``explain(target, states, row)`` (optional) says why ``target``
    (a skill ref, or None for the goal) refuses one state. ``begin_with``: skills every
    candidate must start with (the search adds the rest).
    """

    skills: Mapping[str, SkillModel]
    start: Mapping[str, np.ndarray]
    in_goal: Callable[[Mapping[str, np.ndarray]], np.ndarray]
    link: Callable[[str, str], LinkFact]
    goal_link: Callable[[str], LinkFact]
    explain: Callable[[str | None, Mapping[str, np.ndarray], int], str] | None = None
    begin_with: tuple[str, ...] = ()  # every candidate starts with these skills, in this order
    screen: Callable[[str, str], LinkFact] | None = None  # cheap facts asked first (stored check results)
    quick_goal_link: Callable[[str], LinkFact] | None = None  # goal facts that never call a solver (default: goal_link)


@dataclass(frozen=True)
class SearchSettings:
    """Limits of one search. ``top`` candidates are returned, best first."""

    max_length: int = 4
    time_budget_s: float = 60.0
    top: int = 3
    success_tolerance: float = 0.01
    seed: int = 0

    def __post_init__(self) -> None:
        if isinstance(self.max_length, bool) or not isinstance(self.max_length, int) or self.max_length < 1:
            raise ValueError(f"max_length must be a whole number >= 1, got {self.max_length!r}")
        if not (isinstance(self.time_budget_s, (int, float)) and self.time_budget_s > 0):
            raise ValueError(f"time_budget_s must be > 0 seconds, got {self.time_budget_s!r}")
        if isinstance(self.top, bool) or not isinstance(self.top, int) or self.top < 1:
            raise ValueError(f"top must be a whole number >= 1, got {self.top!r}")
        if not (isinstance(self.success_tolerance, (int, float)) and 0.0 < self.success_tolerance < 1.0):
            raise ValueError(f"success_tolerance must lie in (0, 1), got {self.success_tolerance!r}")


@dataclass(frozen=True, eq=False)
class Particles:
    """The particles after a prefix: per-particle mass, discount and end state, plus the prefix's totals."""

    states: Mapping[str, np.ndarray]
    mass: np.ndarray
    discount: np.ndarray
    steps: float
    error: float
    scored_by: tuple[str, ...] = ()

    @property
    def success(self) -> float:
        return float(np.mean(self.mass))

    @property
    def discounted(self) -> float:
        return float(np.mean(self.discount))

    @property
    def standard_error(self) -> float:
        """Monte Carlo standard error of ``success`` over the particles."""
        n = self.mass.size
        return float(np.std(self.mass, ddof=1) / math.sqrt(n)) if n > 1 else 0.0

    @property
    def stated_error(self) -> float:
        """Models' held-out error plus three Monte Carlo standard errors (at least 1/n)."""
        return float(self.error + max(3.0 * self.standard_error, 1.0 / self.mass.size))


@dataclass(frozen=True)
class Candidate:
    """A chain that reaches the goal, with its predicted scores."""

    skills: tuple[str, ...]
    success: float
    discounted: float
    steps: float
    stated_error: float
    goal: LinkFact
    scored_by: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return {
            "skills": list(self.skills), "predicted_success": self.success, "predicted_discounted_success": self.discounted,
            "expected_steps": self.steps, "stated_error": self.stated_error, "goal": {"status": self.goal.status, "reason": self.goal.reason},
            "scored_by": list(self.scored_by),
        }


@dataclass(frozen=True)
class Failure:
    """Where a sequence stopped being a candidate: the prefix that got there, the failing link and why."""

    skills: tuple[str, ...]  # the prefix before the failing link
    link: tuple[str, str]  # (from, to): ("initial states", B), (A, B) or (A, "goal")
    reason: str
    success_before: float

    def to_dict(self) -> dict[str, Any]:
        return {"skills": list(self.skills), "from": self.link[0], "to": self.link[1], "reason": self.reason, "success_before": self.success_before}


@dataclass(frozen=True)
class SearchResult:
    """Candidates best first, the closest failure when there is none, and how much work it took."""

    candidates: tuple[Candidate, ...]
    closest: Failure | None
    scored: int  # sequences scored (prefixes and goal tests)
    pruned: int  # handoffs skipped by pair facts
    seconds: float
    complete: bool  # False when the time budget ran out first
    pair_facts: Mapping[tuple[str, str], LinkFact] = field(default_factory=dict)

    @property
    def scored_per_second(self) -> float:
        return self.scored / self.seconds if self.seconds > 0 else float("inf")


# ---------------------------------------------------------------------------
# scoring one step


def _take(states: Mapping[str, np.ndarray], rows: np.ndarray) -> dict[str, np.ndarray]:
    return {k: np.asarray(v)[rows] for k, v in states.items()}


def start_particles(start: Mapping[str, np.ndarray]) -> Particles:
    n = len(next(iter(start.values())))
    return Particles({k: np.asarray(v) for k, v in start.items()}, np.ones(n), np.ones(n), 0.0, 0.0)


def _accept(problem: PlanProblem, fact: LinkFact, skill: SkillModel, p: Particles) -> np.ndarray:
    if fact.status == PROVED:
        return p.mass > 0
    ok = np.zeros(p.mass.size, dtype=bool)
    live = np.flatnonzero(p.mass > 0)
    if live.size:
        ok[live] = np.asarray(skill.accepts(_take(p.states, live)), dtype=bool)
    return ok


def _extend(problem: PlanProblem, p: Particles, ref: str, fact: LinkFact, rng: np.random.Generator) -> tuple[Particles, str]:
    """Particles after running skill ``ref`` from ``p``; the second value says why mass was lost, if all of it was."""
    skill = problem.skills[ref]
    ok = _accept(problem, fact, skill, p)
    mass = np.where(ok, p.mass, 0.0)
    live = np.flatnonzero(mass > 0)
    if live.size == 0:
        return replace_mass(p, mass), "refused"
    res = skill.step(_take(p.states, live), rng)
    states = {k: np.array(v, copy=True) for k, v in p.states.items()}
    for k, v in res.ends.items():
        if k in states:
            states[k][live] = v
    stop = np.where(res.unknown, 0.0, np.asarray(res.p_stop, dtype=np.float64))
    stop_discount = np.where(res.unknown, 0.0, np.asarray(res.stop_discount, dtype=np.float64))
    steps = p.steps + float(np.sum(mass[live] * res.duration)) / mass.size
    new_mass = np.zeros_like(mass)
    new_mass[live] = mass[live] * stop
    discount = np.zeros_like(mass)
    discount[live] = p.discount[live] * stop_discount  # E[gamma^K 1{on track}]: the acceptance is in ``live``
    out = Particles(states, new_mass, discount, steps, p.error + res.error, (*p.scored_by, res.scored_by))
    return out, ("" if np.any(new_mass > 0) else "never stopped")


def replace_mass(p: Particles, mass: np.ndarray) -> Particles:
    return Particles(p.states, mass, np.where(mass > 0, p.discount, 0.0), p.steps, p.error, p.scored_by)


def _goal(problem: PlanProblem, p: Particles, fact: LinkFact) -> Particles:
    if fact.status == PROVED:
        return p
    live = np.flatnonzero(p.mass > 0)
    ok = np.zeros(p.mass.size, dtype=bool)
    if live.size:
        ok[live] = np.asarray(problem.in_goal(_take(p.states, live)), dtype=bool)
    return replace_mass(p, np.where(ok, p.mass, 0.0))


def score_sequence(problem: PlanProblem, skills: Sequence[str], *, seed: int = 0) -> tuple[Particles, Failure | None]:
    """Score one whole sequence (goal test included) as the search would; for enumeration and tests."""
    p = start_particles(problem.start)
    prev: str | None = None
    for i, ref in enumerate(skills):
        fact = LinkFact(OPEN) if prev is None or problem.screen is None else problem.screen(prev, ref)
        if fact.status == BROKEN:
            return replace_mass(p, np.zeros_like(p.mass)), Failure(tuple(skills[:i]), (prev or "initial states", ref), fact.reason, p.success)
        before = p.success
        p, lost = _extend(problem, p, ref, fact, _child_rng(seed, skills[: i + 1]))
        if lost:
            return p, Failure(tuple(skills[:i]), (prev or "initial states", ref), lost, before)
        prev = ref
    fact = problem.goal_link(skills[-1])
    if fact.status == IMPOSSIBLE:
        return replace_mass(p, np.zeros_like(p.mass)), Failure(tuple(skills), (skills[-1], GOAL), fact.reason, p.success)
    return _goal(problem, p, fact), None


def _child_rng(seed: int, prefix: Sequence[str]) -> np.random.Generator:
    """A generator per prefix, so a prefix scores the same in the search and in enumeration."""
    import zlib

    key = zlib.crc32("\x1f".join(prefix).encode("utf-8"))
    return np.random.default_rng([seed, key])


# ---------------------------------------------------------------------------
# the search


@dataclass(order=True)
class _Entry:
    key: tuple
    order: int
    skills: tuple[str, ...] = field(compare=False)
    kind: str = field(compare=False)  # "prefix" (unscored), "scored" (a scored prefix), "candidate"
    parent: Particles | None = field(compare=False, default=None)
    particles: Particles | None = field(compare=False, default=None)
    fact: LinkFact | None = field(compare=False, default=None)


def _key(p: Particles, length: int, tolerance: float) -> tuple:
    level = math.floor(p.success / tolerance + 1e-9)
    return (-level, round(p.steps, 9), length)


class _Search:
    """State of one best-first search (queue, counters, closest failure)."""

    def __init__(self, problem: PlanProblem, settings: SearchSettings):
        self.problem, self.settings = problem, settings
        self.queue: list[_Entry] = []
        self.counter = 0
        self.scored = 0
        self.pruned = 0
        self.closest: Failure | None = None
        self._closest_rank: tuple = ()
        self.facts: dict[tuple[str, str], LinkFact] = {}
        self.found: list[Candidate] = []

    def push(self, key: tuple, skills: tuple[str, ...], kind: str, **kw: Any) -> None:
        self.counter += 1
        heapq.heappush(self.queue, _Entry(key, self.counter, skills, kind, **kw))

    def fail(self, skills: tuple[str, ...], link: tuple[str, str], reason: str | Callable[[], str], before: float, *,
             pruned: bool = False) -> None:
        """Remember the closest failure: measured at the goal, then measured at a handoff, then pruned by a
        pair fact; within a tier the most mass before the failing link, then the shortest prefix. ``reason``
        may be a function: it is called only for a failure that becomes the closest (explaining costs time)."""
        tier = 0 if pruned else (2 if link[1] == GOAL else 1)
        rank = (tier, before, -len(skills))
        if self.closest is None or rank > self._closest_rank:
            text = reason() if callable(reason) else reason
            self.closest, self._closest_rank = Failure(skills, link, text, before), rank

    def fact(self, a: str, b: str) -> LinkFact:
        if (a, b) not in self.facts:
            self.facts[(a, b)] = self.problem.link(a, b) if b != GOAL else self.problem.goal_link(a)
        return self.facts[(a, b)]

    def quick_goal(self, a: str) -> LinkFact:
        """The goal fact that needs no solver when the problem has one, else the full one (kept per skill)."""
        if self.problem.quick_goal_link is None:
            return self.fact(a, GOAL)
        return self.problem.quick_goal_link(a)

    def why_refused(self, target: str | None, p: Particles, mask: np.ndarray) -> str:
        rows = np.flatnonzero(mask)
        if self.problem.explain is None or rows.size == 0:
            return ""
        return self.problem.explain(target, p.states, int(rows[0]))

    def children(self, e: _Entry) -> None:
        """Test the goal on a scored prefix (a candidate is queued with its own key), then queue every next
        skill, unscored, with the parent's key (they are scored only when they reach the front)."""
        fixed = self.problem.begin_with
        dominated = len(e.skills) >= len(fixed) and self.score_goal(_Entry(e.key, 0, e.skills, "goal", parent=e.particles))
        if len(e.skills) >= self.settings.max_length or dominated:
            return  # every extension of a prefix whose particles all end in the goal is dominated
        # a skill never follows itself: it would start where its own stop put it
        last = e.skills[-1]
        nxt = [fixed[len(e.skills)]] if len(e.skills) < len(fixed) else [r for r in self.problem.skills if r != last]
        known = [r for r in nxt if self.fact(last, r).status in (IMPOSSIBLE, BROKEN)]
        if len(e.skills) + 1 == self.settings.max_length and len(e.skills) >= len(fixed):
            # the child would have to end the chain: one whose stop region never meets the goal is useless
            known += [r for r in nxt if r not in known and self.quick_goal(r).status == IMPOSSIBLE]
        self.pruned += len(known)
        nxt = [r for r in nxt if r not in known]
        for ref in nxt:
            self.push(e.key, (*e.skills, ref), "prefix", parent=e.particles)

    def allowed(self, e: _Entry, target: str) -> LinkFact | None:
        """The pair fact of ``e``'s last link, or None (counted and remembered as a failure) when it prunes."""
        if len(e.skills) == 1 and target != GOAL:
            return LinkFact(OPEN)
        a = e.skills[-1] if target == GOAL else e.skills[-2]
        f = self.quick_goal(a) if target == GOAL else self.fact(a, target)
        if target != GOAL and f.status not in (IMPOSSIBLE, BROKEN) and self.problem.screen is not None:
            screened = self.problem.screen(a, target)
            f = screened if screened.status == BROKEN else f
        if f.status in (IMPOSSIBLE, BROKEN):
            self.pruned += 1
            prefix = e.skills if target == GOAL else e.skills[:-1]
            self.fail(prefix, (a, target), f.reason, e.parent.success, pruned=True)
            return None
        return f

    def score_prefix(self, e: _Entry) -> None:
        ref = e.skills[-1]
        fact = self.allowed(e, ref)
        if fact is None:
            return
        self.scored += 1
        parent = e.parent
        p, lost = _extend(self.problem, parent, ref, fact, _child_rng(self.settings.seed, e.skills))
        if lost:
            source = e.skills[-2] if len(e.skills) > 1 else "initial states"
            self.fail(e.skills[:-1], (source, ref), lambda: self.lost_text(lost, e, parent, p), parent.success)
            return
        self.push(_key(p, len(e.skills), self.settings.success_tolerance), e.skills, "scored", particles=p)

    def lost_text(self, lost: str, e: _Entry, parent: Particles, p: Particles) -> str:
        ref = e.skills[-1]
        n = int(np.sum(parent.mass > 0))
        if lost == "refused":
            why = self.why_refused(ref, parent, parent.mass > 0)
            return f"{ref} refused all {n} states it was offered" + (f"; first: {why}" if why else "")
        return f"{ref} accepted its start states but never stopped in time ({p.scored_by[-1] if p.scored_by else ''})"

    def score_goal(self, e: _Entry) -> bool:
        """Queue the prefix as a candidate when some particles end in the goal; True when all of them do (or the
        goal is proved): its extensions can only lose success and add steps, so they are not searched."""
        fact = self.allowed(e, GOAL)
        if fact is None:
            return False
        self.scored += 1
        p = _goal(self.problem, e.parent, fact)
        if p.success <= 0:
            def text() -> str:
                why = self.why_refused(None, e.parent, e.parent.mass > 0)
                return f"none of the end states of {e.skills[-1]} satisfies the goal" + (f"; first: {why}" if why else "")

            self.fail(e.skills, (e.skills[-1], GOAL), text, e.parent.success)
            return False
        self.push(_key(p, len(e.skills), self.settings.success_tolerance), e.skills, "candidate", particles=p, fact=fact)
        return fact.status == PROVED or bool(np.array_equal(p.mass, e.parent.mass))

    def roots(self) -> None:
        p = start_particles(self.problem.start)
        key = _key(p, 0, self.settings.success_tolerance)
        for ref in self.problem.begin_with[:1] or list(self.problem.skills):
            self.push(key, (ref,), "prefix", parent=p)

    def run(self) -> bool:
        """Pop until ``top`` candidates or an empty queue; False when the time budget ran out."""
        deadline = time.monotonic() + self.settings.time_budget_s
        self.roots()
        while self.queue and len(self.found) < self.settings.top:
            if time.monotonic() > deadline:
                return False
            e = heapq.heappop(self.queue)
            if e.kind == "prefix":
                self.score_prefix(e)
            elif e.kind == "scored":
                self.children(e)
            else:
                p = e.particles
                self.found.append(Candidate(e.skills, p.success, p.discounted, p.steps, p.stated_error, e.fact, p.scored_by))
        return True


def search_chains(problem: PlanProblem, settings: SearchSettings | None = None) -> SearchResult:
    """Best-first search for chains that reach the goal; the ``top`` best by (success, then expected steps)."""
    settings = settings or SearchSettings()
    if not problem.skills:
        raise ValueError("the search needs at least one skill, got none")
    unknown = [ref for ref in problem.begin_with if ref not in problem.skills]
    if unknown:
        raise ValueError(f"begin_with names skills the problem does not have: {unknown}; known: {list(problem.skills)}")
    if len(problem.begin_with) > settings.max_length:
        raise ValueError(f"begin_with has {len(problem.begin_with)} skills, more than max_length {settings.max_length}")
    t0 = time.monotonic()
    s = _Search(problem, settings)
    complete = s.run()
    return SearchResult(
        _goal_proofs(problem, s.found), s.closest if not s.found else None, s.scored, s.pruned, time.monotonic() - t0, complete,
        dict(s.facts),
    )


def _goal_proofs(problem: PlanProblem, found: list[Candidate]) -> tuple[Candidate, ...]:
    """The search tests the goal with facts that need no solver; the few candidates it returns ask the full
    ``goal_link`` (z3 where the predicates allow), so a proved goal reaches the confirmation."""
    if problem.quick_goal_link is None:
        return tuple(found)
    out = []
    for c in found:
        if c.goal.status != PROVED:
            fact = problem.goal_link(c.skills[-1])
            c = replace(c, goal=fact) if fact.status == PROVED else c
        out.append(c)
    return tuple(out)
