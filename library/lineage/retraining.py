"""Retrain a stored version into a child that records how it was made, apply the promotion rule,
and re-run a retrain from the stored record alone.

The child holds, besides spec and parameters: ``variant.yaml`` and ``initial_states.yaml``
(the task files, byte for byte), ``record.json`` (method, parent, task files and their
digests, config, seed, code and software versions) and ``evaluation.json`` (training-time
metrics and the promotion test). All of it is deterministic for a seed, so a re-run gives
the same files and therefore the same identity.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from kinetome.library.lineage.promotion import DEFAULT_EPISODES, compare_on_tasks
from kinetome.library.lineage.roles import EVALUATION_FILE, INITIAL_STATES_FILE, RECORD_FILE, VARIANT_FILE
from kinetome.library.store.metadata import canonical_json

__all__ = ["TaskFiles", "ChildDraft", "RECORD_SCHEMA", "TRAIN_RECORD_SCHEMA", "run_retrain", "apply_promotion", "reproduce_retrain", "current_versions", "train_record", "record_bytes"]

RECORD_SCHEMA = "kinetome.retrain-record/1"
TRAIN_RECORD_SCHEMA = "kinetome.train-record/1"
# learning-curve columns that measure the machine, not the training: left out of the stored curve
TIMING_COLUMNS = ("steps_per_s",)
EVALUATION_SCHEMA = "kinetome.retrain-evaluation/1"


@dataclass(frozen=True)
class TaskFiles:
    """The files that define a retrain's task: the variant and (optionally) the initial states."""

    variant_name: str
    variant: bytes
    initial_states_name: str | None = None
    initial_states: bytes | None = None

    @classmethod
    def from_paths(cls, variant: str | Path, initial_states: str | Path | None) -> TaskFiles:
        v = Path(variant)
        s = None if initial_states is None else Path(initial_states)
        return cls(v.name, v.read_bytes(), None if s is None else s.name, None if s is None else s.read_bytes())

    def write(self, folder: Path) -> tuple[Path, Path | None]:
        """Write the files under their own names into ``folder`` (read back by the usual loaders)."""
        folder.mkdir(parents=True, exist_ok=True)
        variant = folder / self.variant_name
        variant.write_bytes(self.variant)
        if self.initial_states is None or self.initial_states_name is None:
            return variant, None
        states = folder / self.initial_states_name
        states.write_bytes(self.initial_states)
        return variant, states


@dataclass(frozen=True)
class ChildDraft:
    """A retrained child before it is stored: files, index metadata, trainer result and promotion evidence."""

    files: dict[str, bytes]
    meta: dict[str, Any]
    result: Any  # trainers.retrain.RetrainResult
    promotion: dict[str, Any]


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _record(parent_ref: str, parent_identity: str, task: TaskFiles, variant: Any, states: Any, cfg: Any, seed: int, from_scratch: bool) -> dict[str, Any]:
    from kinetome.library.provenance import code_version, software_versions

    return {
        "schema": RECORD_SCHEMA,
        "method": "retrain",
        "parent": {"ref": parent_ref, "identity": parent_identity},
        "variant": {"file": task.variant_name, "name": variant.name, "digest": variant.digest, "sha256": _sha256(task.variant)},
        "initial_states": _states_record(task, states),
        "config": cfg.as_dict(),
        "seed": int(seed),
        "from_scratch": bool(from_scratch),
        "code": code_version(),
        "software": software_versions(),
    }


def _file_record(path: str | Path | None) -> dict[str, Any] | None:
    """A file an input was read from: its name and sha256 (None: not given; a bare name: sha256 None)."""
    if path is None:
        return None
    file = Path(path)
    return {"file": str(path), "sha256": _sha256(file.read_bytes()) if file.is_file() else None}


def train_record(
    parent: tuple[str, str], trained_with: list[tuple[str, str]], *, training_file: str | Path, variant_file: str | Path | None,
    variant: Any, initial_states_file: str | Path | None, config: dict[str, Any], seed: int,
) -> dict[str, Any]:
    """``record.json`` of a version refined by ``kinetome train`` (options mode): the parent and every
    skill trained with it (ref, identity), the input files and their digests, config, seed, code and software."""
    from kinetome.library.provenance import code_version, software_versions

    variant_part = _file_record(variant_file)
    if variant_part is not None and variant is not None:
        variant_part.update(name=variant.name, digest=variant.digest)
    return {
        "schema": TRAIN_RECORD_SCHEMA,
        "method": "train",
        "parent": {"ref": parent[0], "identity": parent[1]},
        "trained_with": [{"ref": ref, "identity": identity} for ref, identity in trained_with],
        "training_file": _file_record(training_file),
        "variant": variant_part,
        "initial_states": _file_record(initial_states_file),
        "config": config,
        "seed": int(seed),
        "code": code_version(),
        "software": software_versions(),
    }


def record_bytes(record: dict[str, Any]) -> bytes:
    """A record as stored: canonical values, indented JSON."""
    return _json_bytes(record)


def _stored_curve(rows: list[dict[str, Any]]) -> bytes:
    """The learning curve as the version stores it: deterministic for a seed (no timing columns)."""
    from kinetome.trainers.curves import curve_csv

    return curve_csv([{k: v for k, v in row.items() if k not in TIMING_COLUMNS} for row in rows]).encode("utf-8")


def _states_record(task: TaskFiles, states: Any) -> dict[str, Any] | None:
    """Which initial states the retrain used: a file given (stored beside it), the spec's own, or the env's default (None)."""
    if task.initial_states is not None:
        return {"file": task.initial_states_name, "name": states.name, "sha256": _sha256(task.initial_states)}
    return None if states is None else {"file": None, "name": states.name, "from": "spec.json"}


def _json_bytes(value: Any) -> bytes:
    return (json.dumps(json.loads(canonical_json(value)), indent=1, sort_keys=True) + "\n").encode()


def run_retrain(
    parent: Any,
    parent_identity: str,
    *,
    task: TaskFiles,
    config: Any,
    seed: int,
    workdir: Path,
    checkpoint_dir: Path | None = None,
    parent_task: Any = None,
    parent_ref: str | None = None,
    from_scratch: bool = False,
    workers: int = 1,
    resume: bool = False,
    progress: Any = None,
    promotion_episodes: int = DEFAULT_EPISODES,
    method: str = "actor-critic",
    current: dict[str, Any] | None = None,
) -> ChildDraft:
    """Train ``parent`` (a LoadedSkill) on ``task``, test the child against it on fresh episodes,
    and build the child's files. ``parent_task``: the parent's own task (a TaskVariant, None: nominal).
    ``method``: ``actor-critic`` or ``search`` (see ``trainers.retrain.METHODS``). ``current``: task name ->
    the loaded version current for it, which the child must match there (``promotion.compare_on_tasks``)."""
    from kinetome.trainers.retrain import retrain_skill

    from kinetome.library.initial_states import skill_initial_states
    from kinetome.library.runtime.skill import PARAMS_FILE, SPEC_FILE
    from kinetome.library.spec import canonical_json as spec_json
    from kinetome.library.spec import skill_to_document
    from kinetome.library.stored_meta import variant_record
    from kinetome.library.tasks import load_start_file, load_variant_file, task_rig

    variant_path, states_path = task.write(workdir / "task")
    variant = load_variant_file(variant_path)
    # no initial-states file given: the skill's own (stored in its spec), else the env's default
    states = load_start_file(states_path) if states_path is not None else skill_initial_states(parent.skill)
    rig = task_rig(parent.skill.env, variant)
    result = retrain_skill(
        parent, rig, config, start=states, seed=seed, workers=workers, progress=progress,
        checkpoint_dir=checkpoint_dir or workdir / "checkpoints", resume=resume, from_scratch=from_scratch, method=method,
    )
    promotion = compare_on_tasks(
        parent, result.parameters, trained_variant=variant, parent_task=parent_task,
        initial_states=states, episodes=promotion_episodes, seed=seed, workers=workers, current=current,
    )
    record = _record(parent_ref or parent.ref, parent_identity, task, variant, states, result.config, seed, from_scratch)
    training = {"env_steps": result.steps, "updates": result.updates, "completed": result.completed,
                "before": result.before.as_dict(), "after": result.after.as_dict()}
    files = {
        SPEC_FILE: spec_json(skill_to_document(parent.skill)),
        PARAMS_FILE: result.parameters_bytes,
        **({} if result.normaliser is None else {"normaliser.safetensors": result.normaliser}),  # a search keeps none
        "curve.csv": _stored_curve(result.curve),
        VARIANT_FILE: task.variant,
        RECORD_FILE: _json_bytes(record),
        EVALUATION_FILE: _json_bytes({"schema": EVALUATION_SCHEMA, "training": training, "promotion": promotion}),
    }
    if task.initial_states is not None:
        files[INITIAL_STATES_FILE] = task.initial_states
    meta = {
        "method": "retrain",
        "trainer": result.metadata()["trainer"],  # actor-critic or cma-es
        "description": parent.skill.description,
        "env": parent.skill.env,
        "kind": parent.skill.controller.kind,
        "variant": variant_record(task.variant_name, variant),
        "seed": int(seed),
        "env_steps": result.steps,
        "metrics_before": result.before.as_dict(),
        "metrics_after": result.after.as_dict(),
        "wall_time_s": round(result.wall_time, 3),
    }
    return ChildDraft(files, meta, result, promotion)


def apply_promotion(store: Any, child_ref: str, promotion: dict[str, Any]) -> list[str]:
    """Make the child current for each task the promotion test passed (trained task, nominal), as long as
    the version it was tested against is still the one current there (else, e.g. an earlier child of the
    same batch took the task meanwhile, it is left as it is: the child was not tested against that one)."""
    done = []
    rows = {row["task"]: row for row in promotion["tasks"]}
    for task in promotion["current_for"]:
        row = rows[task]
        compared_with = row.get("compared_with", promotion["parent"])
        now = store.currents(child_ref).get(task)
        if now is not None and now.version != compared_with:
            continue
        evidence = {
            "parent_ref": promotion["parent"],
            "parent": row["parent"],
            "compared_with": compared_with,
            "compared": row.get("compared", row["parent"]),
            "child": row["child"],
            "lower_bound": row["lower_bound"],
            "margin": promotion["margin"],
            "alpha": promotion["alpha"],
            "seed": promotion["seed"],
        }
        store.promote(child_ref, task=task, reason="non-inferior", evidence=evidence)
        done.append(task)
    return done


def current_versions(store: Any, name: str, tasks: list[str]) -> dict[str, str]:
    """task -> the ref of the version current for it, for those of ``tasks`` that have one."""
    currents = store.currents(name)
    return {task: currents[task].version for task in tasks if task in currents}


def parent_task_of(store: Any, version: Any, folder: Path) -> Any:
    """The task a stored version was made for, as a TaskVariant (None: nominal or unknown)."""
    from kinetome.library.tasks import load_variant_file

    from .view import read_json_file

    if VARIANT_FILE not in version.roles:
        return None
    record = read_json_file(store, version, RECORD_FILE) or {}
    name = (record.get("variant") or {}).get("file") or VARIANT_FILE
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / Path(name).name
    path.write_bytes(store.read_file(version, VARIANT_FILE))
    return load_variant_file(path)


def _recorded_baselines(store: Any, promotion: dict[str, Any]) -> dict[str, Any]:
    """The versions a stored promotion test compared the child with, loaded (tasks compared with the parent left out)."""
    from kinetome.library.runtime.skill import load_skill

    return {row["task"]: load_skill(store, row["compared_with"]) for row in promotion["tasks"]
            if row.get("compared_with", promotion["parent"]) != promotion["parent"]}


def reproduce_retrain(store: Any, ref: str, *, workdir: str | Path, workers: int = 1) -> dict[str, Any]:
    """Re-run the retrain that made ``ref`` from what the version records (its parent must be in
    ``store``); compare every file. Returns the recomputed identity, digests and differing roles."""
    from kinetome.trainers.config import config_from_mapping

    from kinetome.library.runtime.skill import load_skill
    from kinetome.library.store import version_identity

    from .view import read_json_file

    work = Path(workdir)
    child = store.get(ref)
    record = read_json_file(store, child, RECORD_FILE)
    evaluation = read_json_file(store, child, EVALUATION_FILE)
    if record is None or evaluation is None or record.get("schema") != RECORD_SCHEMA:
        from kinetome.library.errors import InvalidInputError

        raise InvalidInputError(f"{child.ref} holds no retrain record ({RECORD_FILE}); only retrains stored with one can be re-run")
    parent_identity = record["parent"]["identity"]
    parent_version = store.get(f"{child.name}@id:{parent_identity}")
    given = INITIAL_STATES_FILE in child.roles
    task = TaskFiles(
        record["variant"]["file"], store.read_file(child, VARIANT_FILE),
        record["initial_states"]["file"] if given else None, store.read_file(child, INITIAL_STATES_FILE) if given else None,
    )
    draft = run_retrain(
        load_skill(store, parent_version.ref), parent_identity, task=task,
        config=config_from_mapping(dict(record["config"]), source=f"{child.ref} {RECORD_FILE}"),
        seed=int(record["seed"]), workdir=work, parent_task=parent_task_of(store, parent_version, work / "parent-task"),
        parent_ref=record["parent"]["ref"], from_scratch=bool(record["from_scratch"]), workers=workers,
        promotion_episodes=int(evaluation["promotion"]["episodes"]),
        current=_recorded_baselines(store, evaluation["promotion"]),
    )
    digests = {role: _sha256(data) for role, data in draft.files.items()}
    differences = sorted(r for r in set(digests) | set(child.digests) if digests.get(r) != child.digests.get(r))
    identity = version_identity(child.name, digests, parent_identity=parent_identity, reason="retrained")
    return {"ref": child.ref, "identity": identity, "identical": identity == child.identity, "differences": differences, "digests": digests}
