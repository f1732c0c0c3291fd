"""Check a chain: structural checks, then the methods cheapest first, then one verdict per handoff.

A handoff A -> B composes when A ends by its stop condition in time (liveness)
and B's ``starts_when`` holds there (containment). The static method can prove
containment only; liveness needs simulation (or option models valid for this
task). So ``auto`` runs static, then the models, then simulation; how many
episodes it runs follows ``sequential.py``.
The entry (initial states -> first skill) is proved statically when the initial
states form a box over raw state, else measured on sampled initial states.
"""

from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path
from typing import Any

from ..safety import caution_for
from .chain import Chain, load_chain
from .combine import combine_handoff, whole_chain_verdict
from .context import CheckContext, CheckOptions, prepare_context
from .entry import sample_entry
from .evidence import Evidence
from .registry import AUTO, get_method, methods
from .result import CheckResult
from .reuse import StoredCheck, check_key, find_stored, store_check, stored_about
from .structural import structural_check

__all__ = ["check_chain", "run_check"]


def check_chain(
    chain: Chain | str | Path,
    *,
    store: Any = None,
    method: str = AUTO,
    episodes: int | None = None,
    seed: int | None = None,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    timeout_ms: int = 10_000,
    gamma: float = 0.99,
    start_samples: int = 1000,
    model_samples: int = 2000,
    block_size: int | None = None,
    progress: Any = None,
    fail_on_gaps: bool = False,
    fail_on_limits: bool = False,
    reuse: bool = True,
) -> CheckResult | StoredCheck:
    """Check that a chain composes. ``chain`` is a Chain or the path of a chain file.

    Raises InvalidInputError (exit code 2) for bad input; otherwise the
    result's ``exit_code`` is 0 (every handoff composes and the whole chain
    meets its requirement), 1 (something breaks or fails) or 3 (unsure).
    ``episodes``/``seed`` override the chain file's values.
    ``progress(done, total)`` follows the simulation in episodes, when one runs.
    With a store and stored skills, the result is kept as evidence of the first skill; the
    same check again (``reuse``) returns that ``StoredCheck`` instead of running (``reuse.py``).
    ``fail_on_gaps`` / ``fail_on_limits``: see ``CheckOptions``; ``workers``/``address``/``threads``:
    where simulation blocks run (``library/execution``), never what they compute.
    """
    extra = {} if block_size is None else {"block_size": block_size}
    options = CheckOptions(
        method=method, episodes=episodes, seed=seed, workers=workers, address=address, threads=threads, gamma=gamma,
        timeout_ms=timeout_ms, start_samples=start_samples, model_samples=model_samples, progress=progress,
        fail_on_gaps=fail_on_gaps, fail_on_limits=fail_on_limits, **extra,
    )
    if not isinstance(chain, Chain):
        chain = load_chain(chain, store=store)
    ctx = prepare_context(chain, store=store, options=options)
    from ..sweep.regions import region_warnings

    # part of the check's key (notes_before_run): a sweep stored since a check makes the check run again
    ctx.notes.extend(region_warnings(store, list(ctx.skills), env=ctx.rig.env_id, variant=ctx.rig.variant,
                                     disturbances=chain.disturbances.to_dict()))
    key = check_key(ctx)
    if key is not None and reuse:
        stored = find_stored(ctx.store, key)
        if stored is not None:
            return stored
    result = run_check(ctx)
    return result if key is None else _keep(ctx.store, key, result)


def _keep(store: Any, key: Any, result: CheckResult) -> CheckResult:
    """Store the result for reuse; a store that refuses the write costs the reuse, not the result."""
    try:
        artifact = store_check(store, key, result)
    except Exception as exc:  # e.g. a read-only store: the check itself stands
        note = f"result not stored for reuse: {type(exc).__name__}: {exc}"
        return replace(result, notes=(*result.notes, note))
    return replace(result, stored=stored_about(artifact))


def _plan(method: str) -> list[str]:
    if method == AUTO:
        return [m.name for m in methods()]
    get_method(method)
    return [method]


def _timed(timings: dict[str, float], name: str, fn: Any, *args: Any) -> Any:
    t0 = time.perf_counter()
    out = fn(*args)
    timings[name] = timings.get(name, 0.0) + time.perf_counter() - t0
    return out


def _decided(evidence: list[Evidence]) -> bool:
    return any(e.decided for e in evidence)


def _gather(ctx: CheckContext, timings: dict[str, float]) -> dict[int, list[Evidence]]:
    """Every method's evidence per handoff (in auto mode the simulation always runs: liveness and the
    whole chain need it; only a structurally broken chain skips it)."""
    checked = ctx.all_handoffs()
    entry, handoffs = checked[0], checked[1:]
    found: dict[int, list[Evidence]] = {j.index: [] for j in checked}
    for idx, ev in _timed(timings, "structural", structural_check, ctx, checked).items():
        found[idx].append(ev)
    broken = any(_decided(evs) for evs in found.values())
    sampled = False
    for name in _plan(ctx.options.method):
        if name != "static" and not sampled and not _decided(found[0]):
            found[0].append(_timed(timings, "entry", sample_entry, ctx, entry))
            sampled = True
        if name == "sim":
            if broken:
                ctx.notes.append("simulation skipped: the chain is structurally broken (see the mismatch above)")
                continue
            targets = handoffs  # one simulation serves every handoff and the whole chain
        else:
            targets = [j for j in (checked if name == "static" else handoffs) if not _decided(found[j.index])]
            if not targets:
                continue
        for idx, ev in _timed(timings, name, get_method(name).fn, ctx, targets).items():
            found[idx].append(ev)
    if not sampled and not _decided(found[0]):
        found[0].append(_timed(timings, "entry", sample_entry, ctx, entry))
    return found


def run_check(ctx: CheckContext) -> CheckResult:
    """Run the plan on a prepared context and assemble the result."""
    timings: dict[str, float] = {}
    found = _gather(ctx, timings)
    results = [combine_handoff(ctx, j, found[j.index]) for j in ctx.all_handoffs()]
    chain = ctx.chain
    start = ""
    if ctx.start is not None:
        start = getattr(ctx.start, "name", "") or str(chain.initial_states)
    variant = (getattr(ctx.rig.variant, "name", "") or chain.variant.stem) if chain.variant is not None else ""
    stats = ctx.chain_stats
    return CheckResult(
        chain=chain,
        method=ctx.options.method,
        all_handoffs=tuple(results),
        whole_chain=stats,
        chain_verdict=whole_chain_verdict(stats, ctx.cache.get("model_chain")),
        model_chain=ctx.cache.get("model_chain") if stats is None else None,
        notes=tuple(dict.fromkeys(ctx.notes)),
        timings=timings,
        env_id=ctx.rig.env_id,
        variant=variant,
        initial_states=start,
        episodes=0 if stats is None else stats.episodes,
        seed=ctx.seed,
        layout=ctx.rig.layout,
        caution=caution_for(ctx.rig),
    )
