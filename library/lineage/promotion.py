"""The retrain promotion rule: a child becomes current for a task only when it is non-inferior, on
fresh episodes, to the version current for that task (the one it would displace); where no version
is current for the task yet, to its parent.

Test: one-sided, H0: p_child - p_parent <= -MARGIN, at level ALPHA. The lower confidence
bound of the difference of success rates is Newcombe's hybrid score bound (Newcombe 1998,
method 10: Wilson score intervals of each rate, combined by square-and-add); the child is
non-inferior when that bound is above -MARGIN. Parent and child run from the same fresh
initial states; the bound treats the two samples as independent, which is conservative
when their outcomes are positively correlated (they share starts).
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import asdict, dataclass
from statistics import NormalDist
from typing import Any

__all__ = [
    "MARGIN",
    "ALPHA",
    "DEFAULT_EPISODES",
    "wilson_interval",
    "newcombe_interval",
    "NonInferiority",
    "non_inferiority",
    "promotion_seed",
    "smallest_promotable_episodes",
    "episodes_hint",
    "compare_on_tasks",
]

MARGIN = 0.05  # success-rate points the child may lose at most (5 percentage points)
ALPHA = 0.05  # one-sided level of the test
DEFAULT_EPISODES = 400  # fresh episodes per version and task


def wilson_interval(successes: int, n: int, *, confidence: float) -> tuple[float, float]:
    """Wilson score interval for a binomial rate (two-sided ``confidence``)."""
    if n < 1:
        raise ValueError(f"episodes must be >= 1, got {n}")
    if not 0 <= successes <= n:
        raise ValueError(f"successes must lie in [0, {n}], got {successes}")
    z = NormalDist().inv_cdf(0.5 + confidence / 2)
    p = successes / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return max(0.0, centre - half), min(1.0, centre + half)


def newcombe_interval(x1: int, n1: int, x2: int, n2: int, *, confidence: float) -> tuple[float, float]:
    """Newcombe's hybrid score interval (method 10) for p1 - p2 of two binomial rates."""
    p1, p2 = x1 / max(n1, 1), x2 / max(n2, 1)
    l1, u1 = wilson_interval(x1, n1, confidence=confidence)
    l2, u2 = wilson_interval(x2, n2, confidence=confidence)
    d = p1 - p2
    return d - math.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2), d + math.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)


@dataclass(frozen=True)
class NonInferiority:
    """The test's inputs and verdict; ``lower_bound`` bounds p_child - p_parent from below."""

    parent_successes: int
    parent_episodes: int
    child_successes: int
    child_episodes: int
    difference: float
    lower_bound: float
    margin: float
    alpha: float
    non_inferior: bool

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


def non_inferiority(
    *, parent: tuple[int, int], child: tuple[int, int], margin: float = MARGIN, alpha: float = ALPHA
) -> NonInferiority:
    """One-sided non-inferiority of the child's success rate; ``parent``/``child`` are (successes, episodes)."""
    (xp, n_p), (xc, nc) = parent, child
    if n_p < 1 or nc < 1:
        raise ValueError(f"episodes must be >= 1 for parent and child, got {n_p} and {nc}")
    low, _ = newcombe_interval(xc, nc, xp, n_p, confidence=1 - 2 * alpha)
    diff = xc / nc - xp / n_p
    return NonInferiority(xp, n_p, xc, nc, diff, low, margin, alpha, low > -margin)


def smallest_promotable_episodes(margin: float = MARGIN, alpha: float = ALPHA) -> int:
    """The fewest episodes at which any child can pass: the best case is a perfect tie (n/n against n/n,
    or 0/n against 0/n), whose bound is the widest Wilson gap, so fewer episodes can never promote.
    Found by running the test itself on growing n (no closed form assumed)."""
    n = 1
    while not non_inferiority(parent=(n, n), child=(n, n), margin=margin, alpha=alpha).non_inferior:
        n += 1
    return n


def episodes_hint(episodes: int, margin: float = MARGIN, alpha: float = ALPHA) -> str | None:
    """A note when ``episodes`` is too few for any child to pass the promotion test, else None."""
    smallest = smallest_promotable_episodes(margin, alpha)
    if episodes >= smallest:
        return None
    tie = non_inferiority(parent=(episodes, episodes), child=(episodes, episodes), margin=margin, alpha=alpha)
    return (f"with {episodes} promotion episodes even a perfect tie ({episodes}/{episodes} against {episodes}/{episodes}) has a lower "
            f"bound of {tie.lower_bound:+.3f}, not above -{margin}, so no child can become current; "
            f"use --promotion-episodes {smallest} or more (the fewest that can pass at margin {margin}, alpha {alpha})")


def promotion_seed(seed: int) -> int:
    """The seed of the promotion test's initial states: derived from the retrain's seed, >= 2**32,
    so never a seed that training (``seed``) or its own evaluation (``seed``) drew from."""
    digest = hashlib.sha256(f"kinetome promotion test/{int(seed)}".encode()).digest()
    return 2**32 + int.from_bytes(digest[:4], "little")


def _successes(skill: Any, rig: Any, starts: Any, seed: int, workers: int) -> int:
    import numpy as np

    from kinetome.library.runtime.execute import run_skill
    from kinetome.library.runtime.records import EndReason

    rollout = run_skill(skill, rig, starts=starts, seed=seed, workers=workers, explore=False)
    return int(np.sum(rollout.segments[0].reason == int(EndReason.STOPPED)))


def _tasks(trained_variant: Any, parent_task: Any) -> list[tuple[str, Any, list[str]]]:
    """(task name, variant, roles) for the trained task, nominal and the parent's own task."""
    from kinetome.envs.variants import NOMINAL

    tasks: dict[str, tuple[Any, list[str]]] = {}
    for variant, role in ((trained_variant, "trained"), (NOMINAL, "nominal"), (parent_task or NOMINAL, "parent's task")):
        tasks.setdefault(variant.name, (variant, []))[1].append(role)
    return [(name, variant, roles) for name, (variant, roles) in tasks.items()]


def _baseline(parent: Any, current: dict[str, Any], name: str, roles: list[str]) -> Any:
    """The version the child is tested against on a task: the one current for it where the child could
    become current there (trained task, nominal), else (or when none is current) the parent."""
    if {"trained", "nominal"} & set(roles) and current.get(name) is not None:
        return current[name]
    return parent


def compare_on_tasks(
    parent: Any,
    child_values: dict[str, Any],
    *,
    trained_variant: Any,
    parent_task: Any,
    initial_states: Any,
    episodes: int = DEFAULT_EPISODES,
    seed: int,
    workers: int = 1,
    current: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Run parent and child (``child_values``: its parameter values) on fresh episodes on the trained
    task, on nominal and on the parent's own task (a TaskVariant, None for nominal); JSON evidence.
    ``current``: task name -> the loaded version current for it (the child is tested against that one
    there, on the same starts; a task with none is tested against the parent)."""
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.library.tasks import task_rig

    child = skill_from_spec(parent.skill, ref=f"{parent.ref} retrained", parameter_values=child_values)
    fresh = promotion_seed(seed)
    rows = []
    for name, variant, roles in _tasks(trained_variant, parent_task):
        rig = task_rig(parent.skill.env, variant)
        starts = sample_starts(rig, initial_states, episodes, seed=fresh)
        baseline = _baseline(parent, current or {}, name, roles)
        parent_successes = _successes(parent, rig, starts, fresh, workers)
        baseline_successes = parent_successes if baseline.ref == parent.ref else _successes(baseline, rig, starts, fresh, workers)
        test = non_inferiority(
            parent=(baseline_successes, episodes),
            child=(_successes(child, rig, starts, fresh, workers), episodes),
        )
        rows.append(
            {
                "task": name,
                "variant_digest": variant.digest,
                "roles": roles,
                "parent": {"successes": parent_successes, "episodes": episodes},
                "compared_with": baseline.ref,
                "compared": {"successes": baseline_successes, "episodes": episodes},
                "child": {"successes": test.child_successes, "episodes": episodes},
                "difference": test.difference,
                "lower_bound": test.lower_bound,
                "non_inferior": test.non_inferior,
            }
        )
    current_for = [r["task"] for r in rows if r["non_inferior"] and {"trained", "nominal"} & set(r["roles"])]
    return {
        "rule": "one-sided non-inferiority of the success rate against the version current for the task "
        "(the parent where none is): Newcombe hybrid score lower bound > -margin",
        "margin": MARGIN,
        "alpha": ALPHA,
        "episodes": episodes,
        "seed": fresh,
        "parent": parent.ref,
        "tasks": rows,
        "current_for": current_for,
        "hint": episodes_hint(episodes),
    }
