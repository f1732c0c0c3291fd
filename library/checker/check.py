"""Check a chain: structural checks, then the methods cheapest first, then one verdict per junction.

``auto`` (the default) runs static where it decides, the option models where
they are attached, and simulation for whatever is still undecided. The entry
(start distribution -> first skill) is proved statically when the start
distribution is a box over raw state, else measured on sampled start states.
Precedence per junction: a structural mismatch breaks it; otherwise the first
method that decides (cheapest first) gives the verdict.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from .chain import Chain, load_chain
from .context import CheckContext, CheckOptions, prepare_context
from .entry import sample_entry
from .evidence import Counterexample, Evidence, Junction
from .registry import AUTO, get_method, methods
from .result import CheckResult, HandoffResult
from .structural import structural_check
from .verdict import Verdict

__all__ = ["check_chain", "run_check"]


def check_chain(
    chain: Chain | str | Path,
    *,
    store: Any = None,
    method: str = AUTO,
    episodes: int | None = None,
    seed: int | None = None,
    workers: int = 1,
    timeout_ms: int = 10_000,
    gamma: float = 0.99,
    start_samples: int = 1000,
    model_samples: int = 2000,
    progress: Any = None,
) -> CheckResult:
    """Check that a chain composes. ``chain`` is a Chain or the path of a chain file.

    Raises InvalidInputError (exit code 2) for bad input; otherwise the
    result's ``exit_code`` is 0 (all compose), 1 (some handoff breaks) or 3
    (some unsure). ``episodes``/``seed`` override the chain file's values.
    ``progress(done, total)`` follows the simulation, when one runs.
    """
    options = CheckOptions(
        method=method, episodes=episodes, seed=seed, workers=workers, gamma=gamma,
        timeout_ms=timeout_ms, start_samples=start_samples, model_samples=model_samples, progress=progress,
    )
    if not isinstance(chain, Chain):
        chain = load_chain(chain, store=store)
    ctx = prepare_context(chain, store=store, options=options)
    return run_check(ctx)


def _plan(method: str) -> list[str]:
    if method == AUTO:
        return [m.name for m in methods()]
    get_method(method)
    return [method]


def _confirm_candidates(static: Evidence, sim: Evidence) -> Evidence:
    """Static candidates become confirmed where the simulation refused states on the same clause."""
    sim_clauses = {cl["clause"] for c in sim.counterexamples for cl in c.clauses}
    if not static.candidates or not sim_clauses:
        return static
    kept, promoted = [], []
    for c in static.candidates:
        if {cl["clause"] for cl in c.clauses} & sim_clauses:
            promoted.append(Counterexample(c.state, c.violations, c.clauses, c.source, True, c.note + "; confirmed: the simulation refused states on the same clause"))
        else:
            kept.append(c)
    return Evidence(static.method, static.verdict, static.reason, static.estimate, static.counterexamples + tuple(promoted), tuple(kept), static.details, static.points, static.accepted)


def run_check(ctx: CheckContext) -> CheckResult:
    """Run the plan on a prepared context and assemble the result."""
    junctions = ctx.junctions()
    found: dict[int, list[Evidence]] = {j.index: [] for j in junctions}
    decided: dict[int, Evidence] = {}
    timings: dict[str, float] = {}

    t0 = time.perf_counter()
    for idx, ev in structural_check(ctx, junctions).items():
        found[idx].append(ev)
        if ev.decided:
            decided[idx] = ev
    timings["structural"] = time.perf_counter() - t0

    handoffs = [j for j in junctions if not j.is_entry]
    structurally_broken = {i for i, e in decided.items() if e.method == "structural"}
    entry_done = False
    for name in _plan(ctx.options.method):
        if name != "static" and not entry_done:
            # The entry is measured on sampled start states once static had its chance.
            entry_done = _run_entry(ctx, junctions[0], found, decided, timings)
        targets = [j for j in (junctions if name == "static" else handoffs) if j.index not in decided]
        if name == "sim" and targets:
            if structurally_broken:
                ctx.notes.append("simulation skipped: the chain is structurally broken (see the mismatch above)")
                continue
            # One rollout serves every handoff: decided ones get it as a cross-check.
            targets = handoffs
        if not targets:
            continue
        t0 = time.perf_counter()
        results = get_method(name).fn(ctx, targets)
        timings[name] = timings.get(name, 0.0) + time.perf_counter() - t0
        for idx, ev in results.items():
            found[idx].append(ev)
            if idx not in decided and ev.decided:
                decided[idx] = ev
    if not entry_done:
        _run_entry(ctx, junctions[0], found, decided, timings)

    results = [_assemble(ctx, j, found[j.index], decided.get(j.index)) for j in junctions]
    chain = ctx.chain
    start = ""
    if ctx.start is not None:
        start = getattr(ctx.start, "name", "") or str(chain.start)
    variant = (getattr(ctx.rig.variant, "name", "") or chain.variant.stem) if chain.variant is not None else ""
    return CheckResult(
        chain=chain,
        method=ctx.options.method,
        junctions=tuple(results),
        chain_stats=ctx.chain_stats,
        notes=tuple(dict.fromkeys(ctx.notes)),
        timings=timings,
        env_id=ctx.rig.env_id,
        variant=variant,
        start=start,
        episodes=ctx.episodes if "sim" in timings else 0,
        seed=ctx.seed,
        layout=ctx.rig.layout,
    )


def _run_entry(ctx: CheckContext, j: Junction, found: dict, decided: dict, timings: dict) -> bool:
    if j.index in decided:
        return True
    t0 = time.perf_counter()
    ev = sample_entry(ctx, j)
    timings["sample"] = timings.get("sample", 0.0) + time.perf_counter() - t0
    found[j.index].append(ev)
    if ev.decided:
        decided[j.index] = ev
    return True


def _assemble(ctx: CheckContext, j: Junction, evidence: list[Evidence], decided: Evidence | None) -> HandoffResult:
    notes: list[str] = []
    sim = next((e for e in evidence if e.method == "sim"), None)
    if sim is not None:
        evidence = [_confirm_candidates(e, sim) if e.method == "static" else e for e in evidence]
        if decided is not None and decided.method == "static" and decided.verdict is Verdict.COMPOSES and sim.counterexamples:
            notes.append(
                f"the static proof assumed the physical envelope and declared limits; the simulation found "
                f"{len(sim.counterexamples)}+ refused stops, so a state left that envelope (check joint limits and limits lint)"
            )
        if decided is not None and decided.method == "static":
            decided = next(e for e in evidence if e.method == "static")
    if decided is not None:
        verdict, by, reason = decided.verdict, decided.method, decided.reason
    else:
        verdict, by = Verdict.UNSURE, None
        tried = [e for e in evidence if e.method != "structural"]
        reason = "; ".join(f"{e.method}: {e.reason}" for e in tried) or "no method could examine it"
    b = ctx.target_skill(j)
    return HandoffResult(
        junction=j,
        verdict=verdict,
        decided_by=by,
        reason=reason,
        evidence=tuple(evidence),
        starts_when=b.starts_when,
        parameters=dict(b.parameters),
        notes=tuple(notes),
    )
