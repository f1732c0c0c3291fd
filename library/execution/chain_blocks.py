"""A chain's episodes as blocks any worker can run: the job as plain data, and the block function.

``chain_job`` describes what to simulate (the robot and task variant, each skill's
stored files, seed, discount, disturbances) as dicts and bytes; ``run_chain_block``
rebuilds the rig and skills from them in the worker (once per process per job) and
runs one block with ``runtime.execute.run_chain``; ``run_chain_blocks`` sends the
blocks to an executor and yields their rollouts in block order. Because a block's
rows draw from per-episode streams, the concatenated blocks equal one batch of all
episodes bit for bit.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any, Callable, Iterator, Sequence

import numpy as np

from .blocks import Block

__all__ = ["chain_job", "run_chain_block", "run_chain_blocks", "skill_files", "variant_document", "job_digest"]

_BUILT: dict[str, tuple[Any, list[Any]]] = {}  # per worker process: job digest -> (rig, skills)
_BUILT_LIMIT = 4


def skill_files(loaded: Any) -> dict[str, bytes]:
    """The files that rebuild ``loaded`` in another process: what it was loaded from, else its spec and parameters."""
    if getattr(loaded, "files", None):
        return dict(loaded.files)
    if loaded.learned_stop is not None:
        raise ValueError(f"{loaded.ref} has a learned stop but no stored files; load it from a store to run it on workers")
    from ..api import version_files

    return version_files(loaded)


def variant_document(variant: Any) -> dict[str, Any]:
    """A task variant as plain data (name, description, the fields it sets)."""
    from kinetome.envs.variants import NOMINAL

    variant = NOMINAL if variant is None else variant
    plain = {k: list(v) if isinstance(v, tuple) else v for k, v in variant.fields_set().items()}
    return {"name": variant.name, "description": variant.description, **plain}


def chain_job(
    skills: Sequence[Any],
    rig: Any,
    *,
    seed: int,
    gamma: float = 0.99,
    explore: bool = False,
    disturbances: Any = None,
    may_time_out: Sequence[bool] | None = None,
    built_for: Sequence[str] | None = None,
    threads: int = 1,
) -> dict[str, Any]:
    """Everything a worker needs to run blocks of this chain, as plain data.

    ``built_for``: per skill, the env whose rig it was built for (default the chain's rig).
    ``threads``: MuJoCo threads per block inside one process.
    """
    envs = list(built_for) if built_for is not None else [rig.env_id] * len(skills)
    if len(envs) != len(skills):
        raise ValueError(f"built_for needs one env per skill ({len(skills)}), got {len(envs)}")
    return {
        "env": rig.env_id,
        "variant": variant_document(rig.variant),
        "skills": [{"ref": s.ref, "files": skill_files(s), "built_for": env} for s, env in zip(skills, envs)],
        "seed": int(seed),
        "gamma": float(gamma),
        "explore": bool(explore),
        "disturbances": None if disturbances is None else disturbances.to_dict(),
        "may_time_out": None if may_time_out is None else [bool(x) for x in may_time_out],
        "threads": int(threads),
    }


def job_digest(job: dict[str, Any]) -> str:
    """sha256 over what builds the rig and the skills (the part a worker caches)."""
    h = hashlib.sha256(json.dumps({"env": job["env"], "variant": job["variant"]}, sort_keys=True).encode())
    for s in job["skills"]:
        h.update(json.dumps([s["ref"], s["built_for"], sorted(s["files"])]).encode())
        for role in sorted(s["files"]):
            h.update(hashlib.sha256(s["files"][role]).digest())
    return h.hexdigest()


def _rebuild_skill(entry: dict[str, Any], rig: Any) -> Any:
    from ..controllers import load_parameters
    from ..runtime.files import LEARNED_STOP_FILE, NORMALISER_FILE, PARAMS_FILE, SPEC_FILE, STOP_HEADS_FILE
    from ..runtime.skill import skill_from_spec, with_learned_stop
    from ..spec import skill_from_document

    files = entry["files"]
    doc = json.loads(files[SPEC_FILE].decode("utf-8"))
    loaded = skill_from_spec(skill_from_document(doc), ref=entry["ref"], rig=rig, parameter_values=load_parameters(files[PARAMS_FILE]))
    if LEARNED_STOP_FILE in files:
        loaded = with_learned_stop(loaded, {r: files[r] for r in (LEARNED_STOP_FILE, STOP_HEADS_FILE, NORMALISER_FILE)})
    return loaded


def _built(job: dict[str, Any]) -> tuple[Any, list[Any]]:
    """The job's rig and skills, built once per worker process."""
    key = job_digest(job)
    if key not in _BUILT:
        from kinetome.envs.variants import TaskVariant

        from ..tasks import task_rig

        rig = task_rig(job["env"], TaskVariant(**job["variant"]))
        rigs = {rig.env_id: rig}
        skills = []
        for entry in job["skills"]:
            if entry["built_for"] not in rigs:
                rigs[entry["built_for"]] = task_rig(entry["built_for"])
            skills.append(_rebuild_skill(entry, rigs[entry["built_for"]]))
        while len(_BUILT) >= _BUILT_LIMIT:
            _BUILT.pop(next(iter(_BUILT)))
        _BUILT[key] = (rig, skills)
    return _BUILT[key]


def run_chain_block(item: dict[str, Any]) -> Any:
    """Run one block: ``item`` = {job, block (Block.to_dict()), qpos (count, nq), qvel (count, nv)} -> ChainRollout."""
    from ..runtime.disturbances import Disturbances
    from ..runtime.execute import run_chain

    job, block = item["job"], Block.from_dict(item["block"])
    rig, skills = _built(job)
    d = job["disturbances"]
    return run_chain(
        skills, rig, starts=(item["qpos"], item["qvel"]), seed=job["seed"], workers=job["threads"], gamma=job["gamma"],
        explore=job["explore"], disturbances=None if d is None else Disturbances.from_mapping(d),
        episode_ids=block.episode_ids, may_time_out=job["may_time_out"],
    )


def run_chain_blocks(
    executor: Any,
    job: dict[str, Any],
    blocks: Sequence[Block],
    starts: Callable[[Block], tuple[np.ndarray, np.ndarray]],
) -> Iterator[Any]:
    """Each block's ChainRollout, in block order; ``starts(block)`` gives its initial states (drawn here)."""
    items = ({"job": job, "block": b.to_dict(), "qpos": np.asarray(q), "qvel": np.asarray(v)} for b in blocks for q, v in [starts(b)])
    return executor.imap(run_chain_block, items)
