"""Chain search: find a chain of stored skills that reaches a goal, score it with option models, confirm it.

``search.py`` is the pure core (no store, CLI or MuJoCo); ``links.py`` asks z3 about
pairs of regions. The rest builds a search problem from a store and confirms the best
candidates with the checker.
"""

from .search import (
    BROKEN,
    IMPOSSIBLE,
    OPEN,
    PROVED,
    Candidate,
    Failure,
    LinkFact,
    Particles,
    PlanProblem,
    SearchResult,
    SearchSettings,
    SkillModel,
    StepResult,
    score_sequence,
    search_chains,
)

__all__ = [
    "BROKEN",
    "IMPOSSIBLE",
    "OPEN",
    "PROVED",
    "Candidate",
    "Failure",
    "LinkFact",
    "Particles",
    "PlanProblem",
    "SearchResult",
    "SearchSettings",
    "SkillModel",
    "StepResult",
    "score_sequence",
    "search_chains",
]
