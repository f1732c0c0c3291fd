"""One sweep cell as plain data, and the pure function that evaluates it (run by any worker).

``evaluate_cell(item)`` builds the cell's rig (base variant plus the cell's axis values),
rebuilds the pinned skills from their stored files (carried in the item: workers never open
the store), draws the cell's initial states and runs its episodes with the
cell's disturbances. Every random draw comes from the cell seed, which depends only on the
sweep seed and the cell index, so a cell's result is the same on any worker and at any
worker count. Success is the skill stopping by its ``stops_when`` (one skill) or the whole
chain succeeding (each handoff handed over, ``may_time_out`` respected); only distinct
trajectories count, as in the checker.
"""

from __future__ import annotations

import hashlib
from typing import Any

__all__ = ["cell_seed", "cell_item", "evaluate_cell"]


def cell_seed(seed: int, index: int) -> int:
    """The seed of cell ``index`` of a sweep with seed ``seed`` (no dependence on workers or other cells)."""
    digest = hashlib.sha256(f"kinetome sweep cell/{int(seed)}/{int(index)}".encode()).digest()
    return int.from_bytes(digest[:4], "little")


def cell_item(target: Any, *, index: int, variant_fields: dict[str, Any], disturbances: dict[str, Any], episodes: int, seed: int) -> dict[str, Any]:
    """The plain, picklable description of one cell that ``evaluate_cell`` runs."""
    return {
        "index": int(index),
        "env": target.env,
        "skills": [dict(entry) for entry in target.skill_entries],
        "may_time_out": list(target.may_time_out),
        "variant": {"name": f"sweep-cell-{index}", **variant_fields},
        "initial_states": target.initial_states,
        "disturbances": dict(disturbances),
        "episodes": int(episodes),
        "seed": cell_seed(seed, index),
    }


def _skills(item: dict[str, Any], rig: Any) -> list[Any]:
    """The cell's skills rebuilt from their files (a worker never opens the store)."""
    from ..execution.chain_blocks import _rebuild_skill

    return [_rebuild_skill(entry, rig) for entry in item["skills"]]


def evaluate_cell(item: dict[str, Any]) -> dict[str, Any]:
    """Run one cell's episodes; (successes, distinct episodes, episodes run, outcome counts) as plain data."""
    import numpy as np

    from kinetome.envs.starts import start_from_mapping
    from kinetome.envs.variants import variant_from_mapping

    from ..checker.trials import distinct_rows, trials_from_rollout
    from ..runtime.disturbances import Disturbances
    from ..runtime.execute import run_chain
    from ..runtime.records import EndReason
    from ..runtime.starts import sample_starts
    from ..tasks import _env_errors, task_rig

    variant = _env_errors(variant_from_mapping, item["variant"], source=f"sweep cell {item['index']}")
    rig = task_rig(item["env"], variant)
    skills = _skills(item, rig)
    start = None if item["initial_states"] is None else start_from_mapping(item["initial_states"], source="sweep initial states")
    n, seed = item["episodes"], item["seed"]
    starts = sample_starts(rig, start, n, seed=[seed, 3])
    flags = tuple(item["may_time_out"])
    rollout = run_chain(skills, rig, starts=starts, seed=seed, workers=1, disturbances=Disturbances.from_mapping(item["disturbances"]),
                        episode_ids=np.arange(n), may_time_out=flags)
    trials = trials_from_rollout(rollout, flags)
    rows = distinct_rows(trials.signature)
    last = rollout.segments[-1].reason
    return {
        "index": item["index"],
        "successes": int(np.sum(trials.chain[rows])),
        "episodes": int(rows.size),
        "episodes_run": int(rollout.n_episodes),
        "env_steps": int(np.sum(rollout.total_steps)),
        "outcomes": {EndReason(code).label: int(np.sum(last == code)) for code in (0, 1, 2, 3, 4)},
    }
