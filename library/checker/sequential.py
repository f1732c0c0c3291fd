"""How many episodes a simulation check runs, in which blocks, and when it may stop early (pure).

Episodes run in blocks of consecutive episode ids; a block's contents and seeds
depend only on the chain's seed and its ids, never on how many workers run it.
Stopping rules look at results only at block boundaries, in block order.

- ``fixed_plan`` (``--method sim``): N episodes, no early stop; verdicts from all N.
- ``auto_plan`` (``--method auto``): a fixed-n zero-failure stage with curtailment,
  then, if something is still open, a second stage on fresh episodes.
  Stage 1 runs n0 episodes, the fewest whose exact one-sided zero-failure bound
  reaches the requirement (59 for 0.95 at 95% confidence). A handoff (or the whole
  chain) composes in stage 1 when every episode handed over through it. Stage 1
  stops at the first block after which no handoff and not the whole chain can still
  pass that test (curtailment: the stage-1 claims are the ones n0 episodes would
  give). Stage 2 runs the rest of the budget (N - n0 fresh episodes) and decides
  what stage 1 left open; its lower bounds use alpha2 = (alpha - r^n0) / (1 - r^n0),
  r = the stricter requirement, so that for any true rate below the requirement
  P(claim in stage 1 or in stage 2) <= r^n0 + (1 - r^n0) * alpha2 = alpha
  (alpha spending over two looks on independent samples). Breaks verdicts and a
  failed chain requirement come from stage 2 only.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterator

import numpy as np

from ..execution.blocks import DEFAULT_BLOCK_SIZE, plan_blocks
from .decision import Decision, decide
from .stats import episodes_for_zero_failures, lower_bound
from .trials import Trials, distinct_rows
from .verdict import Estimate, Verdict

__all__ = ["Stage", "SimPlan", "PlanRun", "fixed_plan", "auto_plan", "split_blocks", "run_plan", "DEFAULT_BLOCK"]

DEFAULT_BLOCK = DEFAULT_BLOCK_SIZE  # the execution layer's block: one size for every spread run


def split_blocks(first: int, count: int, size: int) -> tuple[tuple[int, int], ...]:
    """[first, first + count) as consecutive (start, stop) blocks of at most ``size`` episodes, as even as
    possible (``execution.plan_blocks``: blocks on workers finish together)."""
    if size < 1:
        raise ValueError(f"block size must be >= 1, got {size}")
    if count < 1:
        return ()
    return tuple((b.first, b.stop) for b in plan_blocks(count, size, first=first))


@dataclass(frozen=True)
class Stage:
    """Consecutive episode blocks judged together; ``zero_failure`` marks the curtailed first stage."""

    label: str
    blocks: tuple[tuple[int, int], ...]
    composes_confidence: float
    zero_failure: bool = False

    @property
    def episodes(self) -> int:
        return sum(b - a for a, b in self.blocks)


@dataclass(frozen=True)
class SimPlan:
    stages: tuple[Stage, ...]
    rule: str  # how the plan decides, in words (printed with the result)

    @property
    def budget(self) -> int:
        return sum(s.episodes for s in self.stages)


def fixed_plan(episodes: int, *, confidence: float, block_size: int = DEFAULT_BLOCK) -> SimPlan:
    stage = Stage("fixed", split_blocks(0, episodes, block_size), confidence)
    return SimPlan((stage,), f"fixed n = {episodes} episodes, no early stop")


def auto_plan(episodes: int, *, require: float, confidence: float, block_size: int = DEFAULT_BLOCK) -> SimPlan:
    """Two stages as described in the module doc; one fixed stage when the budget cannot hold both."""
    n0 = episodes_for_zero_failures(require, confidence)
    if n0 >= episodes:
        plan = fixed_plan(episodes, confidence=confidence, block_size=block_size)
        return SimPlan(plan.stages, plan.rule + f" (the budget is within the {n0} episodes a zero-failure stage needs)")
    alpha = 1.0 - confidence
    spent = require**n0
    alpha2 = (alpha - spent) / (1.0 - spent)
    one = Stage("zero-failure", split_blocks(0, n0, block_size), confidence, zero_failure=True)
    two = Stage("second", split_blocks(n0, episodes - n0, block_size), 1.0 - alpha2)
    rule = (
        f"stage 1: {n0} episodes, composes with zero failures (curtailed at the first block after which nothing can pass); "
        f"stage 2: {episodes - n0} fresh episodes for what is left, lower bounds at {100 * (1 - alpha2):.2f}% "
        f"(alpha spending: {alpha:g} = {spent:.4f} + (1 - {spent:.4f}) x {alpha2:.4f})"
    )
    return SimPlan((one, two), rule)


@dataclass
class PlanRun:
    """What running a plan gave: the decision, every trial run (block order), episodes per stage."""

    decision: Decision
    trials: Trials
    run: dict[str, int] = field(default_factory=dict)
    decided_in: dict[str, str] = field(default_factory=dict)  # handoff index or "chain" -> stage label
    curtailed: bool = False

    def rows(self, label: str) -> slice:
        """Rows of ``trials`` (and of the concatenated rollout) that stage ``label`` ran."""
        start = 0
        for name, count in self.run.items():
            if name == label:
                return slice(start, start + count)
            start += count
        return slice(0, 0)


def _still_open(t: Trials) -> bool:
    """Can any handoff or the whole chain still pass the zero-failure test? (The entry is
    decided on sampled initial states before any simulation.) Prefixes are nested, so the
    first handoff's is the last to fail."""
    first_handoff = t.m > 1 and bool(np.all(t.prefix()[:, 1]))
    return first_handoff or bool(np.all(t.chain))


def _zero_failure_claims(t: Trials, n0: int, *, confidence: float, require: float, require_chain: float) -> tuple[list[bool], bool]:
    """Per handoff and for the chain: handed over in every one of n0 distinct episodes, and the bound reaches it."""
    d = distinct_rows(t.signature).size
    enough = t.n == n0 and d == n0
    clean = np.all(t.prefix(), axis=0) if t.n else np.zeros(t.m, dtype=bool)
    bound = lower_bound(n0, n0, confidence)
    per = [bool(enough and clean[j] and bound >= require) for j in range(t.m)]
    return per, bool(enough and np.all(t.chain) and bound >= require_chain)


# run_blocks(blocks) -> the trials of each (first, stop) block, in block order (an iterator; it may
# compute ahead on workers, and is closed when a stage stops early)
BlocksRunner = Callable[[tuple[tuple[int, int], ...]], Iterator[Trials]]


def _run_stage(stage: Stage, run_blocks: BlocksRunner) -> tuple[Trials | None, bool]:
    """Consume the stage's blocks in block order; the zero-failure stage looks after each one."""
    parts: list[Trials] = []
    results = run_blocks(stage.blocks)
    try:
        for (_, b), trials in zip(stage.blocks, results):
            parts.append(trials)
            if stage.zero_failure and not _still_open(Trials.concatenate(parts)):
                return Trials.concatenate(parts), stage.blocks[-1][1] != b
    finally:
        close = getattr(results, "close", None)
        if close is not None:
            close()  # blocks computed ahead of a stop are dropped, unseen
    return (Trials.concatenate(parts) if parts else None), False


def _one_by_one(run_block: Callable[[int, int], Trials]) -> BlocksRunner:
    return lambda blocks: (run_block(a, b) for a, b in blocks)


def run_plan(
    plan: SimPlan,
    run_block: Callable[[int, int], Trials] | None = None,
    *,
    run_blocks: BlocksRunner | None = None,
    require_handoff: float,
    require_chain: float,
    confidence: float,
) -> PlanRun:
    """Run ``plan``; ``run_block(first, stop)`` simulates episodes first..stop-1 and returns their trials
    (or ``run_blocks(blocks)`` yields them block by block, in order). Rules look only at block ends."""
    if (run_block is None) == (run_blocks is None):
        raise ValueError("run_plan needs exactly one of run_block and run_blocks")
    run_blocks = run_blocks if run_blocks is not None else _one_by_one(run_block)  # type: ignore[arg-type]
    kw = dict(require_handoff=require_handoff, require_chain=require_chain, confidence=confidence)
    first = plan.stages[0]
    t1, curtailed = _run_stage(first, run_blocks)
    assert t1 is not None
    runs = {first.label: t1.n}
    d1 = decide(t1, composes_confidence=first.composes_confidence, **kw)
    if not first.zero_failure or d1.single_start or len(plan.stages) == 1:
        return PlanRun(d1, t1, runs, {**{str(j): first.label for j in range(t1.m)}, "chain": first.label}, curtailed)
    per, chain_ok = _zero_failure_claims(t1, first.episodes, confidence=confidence, require=require_handoff, require_chain=require_chain)
    if all(per) and chain_ok:
        return PlanRun(d1, t1, runs, {**{str(j): first.label for j in range(t1.m)}, "chain": first.label}, curtailed)
    second = plan.stages[1]
    t2, _ = _run_stage(second, run_blocks)
    assert t2 is not None
    runs[second.label] = t2.n
    d2 = decide(t2, composes_confidence=second.composes_confidence, **kw)
    checked: list[Estimate] = []
    where: dict[str, str] = {}
    for j in range(t1.m):
        take_first = per[j] and d1.all_handoffs[j].verdict is Verdict.COMPOSES
        checked.append(d1.all_handoffs[j] if take_first else d2.all_handoffs[j])
        where[str(j)] = first.label if take_first else second.label
    chain_first = chain_ok and d1.chain.verdict is Verdict.COMPOSES
    where["chain"] = first.label if chain_first else second.label
    merged = Decision(tuple(checked), d1.chain if chain_first else d2.chain, t1.n + t2.n, d1.distinct + d2.distinct)
    return PlanRun(merged, Trials.concatenate([t1, t2]), runs, where, curtailed)
