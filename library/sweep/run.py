"""Run a sweep: resolve its target, evaluate every cell (through an executor), mark the cells,
derive the valid-for region, and store it as evidence on the version (or reuse the stored one).

The result is a JSON-ready dict (``schema`` kinetome.sweep/1). The same sweep over the same
identities, task and settings, with the same software, returns the stored result
(``reused: true``) without simulating.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

from ..errors import InvalidInputError
from .axes import AXES, cell_disturbances, cell_variant_fields
from .cells import cell_item, evaluate_cell
from .region import correction_text, mark_cells
from .spec import DEFAULT_REQUIRE, SweepSpec

__all__ = ["SWEEP_KIND", "SweepTarget", "resolve_target", "run_sweep", "rank_axes"]

SWEEP_KIND = "sweep"


@dataclass(frozen=True)
class SweepTarget:
    """What every cell runs: env, pinned steps, flags, base task and where the store is."""

    kind: str  # "skill" or "chain"
    label: str  # the skill ref or the chain's name
    env: str
    steps: tuple[str, ...]  # pinned store refs (name@N) or absolute spec paths
    may_time_out: tuple[bool, ...]
    base_variant: Any  # TaskVariant
    initial_states: dict[str, Any] | None
    disturbances: dict[str, Any]
    require: float
    skill_entries: tuple[dict[str, Any], ...]  # per step {ref, files}: what a worker rebuilds each skill from

    @property
    def stored(self) -> bool:
        return all(not s.endswith((".yaml", ".yml")) for s in self.steps)


def _states_mapping(path: Path | None) -> dict[str, Any] | None:
    if path is None:
        return None
    from ..initial_states import read_initial_states

    mapping, problems = read_initial_states(str(Path(path).resolve()), base=Path("."))
    if problems:
        raise InvalidInputError([f"{path}: initial_states: {m}" for m, _ in problems])
    return mapping


def _entries(steps: tuple[str, ...], store: Any, env: str) -> tuple[dict[str, Any], ...]:
    """Each step's files (stored version or spec file), as the execution layer ships skills to workers."""
    from ..execution.chain_blocks import skill_files
    from ..runtime.skill import load_skill, skill_from_spec
    from ..tasks import default_rig

    out = []
    for step in steps:
        if step.endswith((".yaml", ".yml")):
            from ..spec_load import load_spec

            loaded = skill_from_spec(load_spec(step), ref=Path(step).name, rig=default_rig(env))
        else:
            loaded = load_skill(store, step, rig=default_rig(env))
        out.append({"ref": loaded.ref, "files": skill_files(loaded), "built_for": env})
    return tuple(out)


def _skill_target(spec: SweepSpec, store: Any) -> SweepTarget:
    from ..tasks import load_variant_file

    base = load_variant_file(spec.variant)
    from kinetome.envs.variants import NOMINAL

    base = base or NOMINAL
    ref = spec.skill
    if ref.endswith((".yaml", ".yml")):
        from ..spec_load import load_spec

        skill, step = load_spec(ref), str(Path(ref).resolve())
    else:
        if store is None:
            raise InvalidInputError(f"{spec.source}: skill: {ref} names a stored skill but no store was given; pass --store")
        import json as _json

        from ..runtime.files import SPEC_FILE
        from ..spec import skill_from_document

        version = store.get(ref, task=base.name)
        skill, step = skill_from_document(_json.loads(store.read_file(version, SPEC_FILE).decode("utf-8"))), version.ref
    states = _states_mapping(spec.initial_states) if spec.initial_states else skill.initial_states_mapping()
    return SweepTarget("skill", step if not step.endswith(".yaml") else Path(step).name, skill.env, (step,), (False,), base, states,
                       spec.disturbances.to_dict(), spec.require or DEFAULT_REQUIRE, _entries((step,), store, skill.env))


def _chain_target(spec: SweepSpec, store: Any) -> SweepTarget:
    from kinetome.envs.variants import NOMINAL

    from ..checker.chain import load_chain, skill_is_spec_file
    from ..tasks import load_variant_file

    chain = load_chain(spec.chain, store=store)
    base = load_variant_file(chain.variant) or NOMINAL
    steps = tuple(s if skill_is_spec_file(s) else store.get(s, task=base.name).ref for s in chain.skills)
    if isinstance(chain.initial_states, Path):
        states = _states_mapping(chain.initial_states)
    else:
        states = None if chain.initial_states is None else json.loads(json.dumps(dict(chain.initial_states)))
    disturbances = spec.disturbances if spec.disturbances.active else chain.disturbances
    return SweepTarget("chain", chain.name, chain.env, steps, chain.may_time_out, base, states, disturbances.to_dict(),
                       spec.require or chain.chain_requirement, _entries(steps, store, chain.env))


def resolve_target(spec: SweepSpec, store: Any) -> SweepTarget:
    """Pin the target's versions (a bare name: current for the base variant, else nominal) and read its task."""
    return _chain_target(spec, store) if spec.chain is not None else _skill_target(spec, store)


def _digest(value: Any) -> str:
    return hashlib.sha256(json.dumps(value, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def _task(target: SweepTarget) -> dict[str, Any]:
    """The task part of the evidence key: env, base variant (name, digest) and initial states (digest)."""
    v = target.base_variant
    return {"env": target.env, "variant": v.name, "variant_digest": v.digest,
            "initial_states_digest": None if target.initial_states is None else _digest(target.initial_states),
            "may_time_out": list(target.may_time_out)}


def rank_axes(cells: Sequence[dict[str, Any]], axes: Sequence[str]) -> list[dict[str, Any]]:
    """Axes ordered by how much success changes along them: the range (max - min) of the success
    rate averaged over every other axis, per value of the axis (ties keep the sweep's order)."""
    out = []
    for name in axes:
        groups: dict[float, list[float]] = {}
        for c in cells:
            if c["episodes"]:
                groups.setdefault(c["values"][name], []).append(c["successes"] / c["episodes"])
        means = [sum(g) / len(g) for g in groups.values()]
        out.append({"axis": name, "effect": (max(means) - min(means)) if len(means) > 1 else 0.0})
    order = sorted(range(len(out)), key=lambda i: (-out[i]["effect"], i))
    return [out[i] for i in order]


def _assemble(spec: SweepSpec, target: SweepTarget, cells: list[dict[str, float]], results: list[dict[str, Any]]) -> dict[str, Any]:
    marks = mark_cells([(r["successes"], r["episodes"]) for r in results], require=target.require,
                       confidence=spec.confidence, correction=spec.correction)
    rows = []
    for values, r, m in zip(cells, results, marks):
        rows.append({"index": r["index"], "values": values, **m.to_dict(), "episodes_run": r["episodes_run"], "env_steps": r["env_steps"],
                     "outcomes": r["outcomes"]})
    passed = [row["values"] for row in rows if row["mark"] == "pass"]
    region = {
        "require": target.require,
        "confidence": spec.confidence,
        "correction": spec.correction,
        "method": correction_text(spec.correction, len(rows), spec.confidence),
        "axes": list(spec.axis_names),
        "base_variant": {"name": target.base_variant.name, "fields": _plain_fields(target.base_variant)},
        "disturbances": target.disturbances,
        "cells": passed,
        "cells_evaluated": len(rows),
        "rule": "a cell is in the region only when it was evaluated and its corrected lower bound clears the requirement; no interpolation",
    }
    return {
        "name": spec.name,
        "target": {"kind": target.kind, "label": target.label, "skills": list(target.steps)},
        "env": target.env,
        "axes": [{**a.to_dict(), "meaning": AXES[a.name].meaning} for a in spec.axes],
        "grid": spec.samples is None,
        "episodes_per_cell": spec.episodes,
        "seed": spec.seed,
        "cells": rows,
        "region": region,
        "axis_ranking": rank_axes(rows, spec.axis_names),
        "ranking_rule": "range of the success rate over an axis's values, averaged over every other axis",
    }


def _plain_fields(variant: Any) -> dict[str, Any]:
    return {k: list(v) if isinstance(v, tuple) else v for k, v in variant.fields_set().items()}


def run_sweep(spec: SweepSpec, *, store: Any, map_fn: Callable[[Callable, Sequence], list] | None = None, reuse: bool = True,
              progress: Callable[[int, int], None] | None = None) -> dict[str, Any]:
    """Evaluate ``spec`` (or find it stored) and store its region on the target's first version.
    ``map_fn(evaluate_cell, items)`` runs the cells (an executor's ``map``; default: this process)."""
    from ..evidence import find_result, store_result
    from ..output_schema import tagged
    from ..safety import caution_for
    from ..tasks import default_rig

    target = resolve_target(spec, store)
    task, settings = _task(target), {**spec.settings(), "require": target.require, "disturbances": target.disturbances}
    caution = caution_for(default_rig(target.env))
    if reuse and target.stored and store is not None:
        found = find_result(store, SWEEP_KIND, list(target.steps), task=task, settings=settings)
        if found is not None:
            return tagged("sweep", {**found.result, "reused": True, "artifact": found.artifact.ref, "caution": caution})
    cells = spec.cells()
    items = [cell_item(target, index=i, variant_fields=cell_variant_fields(_plain_fields(target.base_variant), c),
                       disturbances=cell_disturbances(target.disturbances, c), episodes=spec.episodes, seed=spec.seed)
             for i, c in enumerate(cells)]
    _check_axes_apply(spec, target, items[0])
    if map_fn is None:
        from ..execution import InProcessExecutor

        map_fn = InProcessExecutor().map
    results = map_fn(evaluate_cell, items)
    if progress is not None:
        progress(len(results), len(items))
    result = _assemble(spec, target, cells, results)
    artifact = None
    if target.stored and store is not None:
        artifact = store_result(store, SWEEP_KIND, list(target.steps), task=task, settings=settings, result=result,
                                meta={"name": spec.name, "cells": len(cells), "in_region": len(result["region"]["cells"])}).ref
    return tagged("sweep", {**result, "reused": False, "artifact": artifact, "caution": caution})


def _check_axes_apply(spec: SweepSpec, target: SweepTarget, first: dict[str, Any]) -> None:
    """Refuse, before any simulation, an axis the robot has nothing for (e.g. friction on the bench arm)."""
    from kinetome.envs.variants import variant_from_mapping

    from ..tasks import _env_errors, task_rig

    try:
        task_rig(target.env, _env_errors(variant_from_mapping, first["variant"], source=spec.source))
    except InvalidInputError as exc:
        raise InvalidInputError([f"{spec.source}: axes: {p}" for p in exc.problems]) from None
