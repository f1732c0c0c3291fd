"""Where a retrain writes: one new folder per run, and finding the run that ``--resume`` continues.

Without ``--out`` a run gets ``kinetome-retrain/<name>-<N>/<variant>/run-<K>/`` with the
next free K (claimed with an exclusive mkdir, so two runs started together never share
one). ``run.json`` there records the store, parent, variant and seed, and the child once
the run finished. ``--resume`` without ``--out`` continues the newest unfinished run of
the same parent, variant and store that holds a checkpoint, and says which.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import InvalidInputError

__all__ = ["RetrainRun", "DEFAULT_ROOT", "claim_run_folder", "new_run", "find_run_to_resume", "explicit_run", "open_run", "mark_finished"]

DEFAULT_ROOT = Path("kinetome-retrain")
RUN_FILE = "run.json"


@dataclass(frozen=True)
class RetrainRun:
    """A retrain's output folder; ``resumed`` when it continues an earlier run there."""

    folder: Path
    resumed: bool

    @property
    def checkpoint_dir(self) -> Path:
        return self.folder / "checkpoints"


def _variant_stem(variant: str | Path) -> str:
    return Path(str(variant)).stem or "variant"


def _runs_folder(parent_ref: str, variant: str | Path, root: Path) -> Path:
    return root / parent_ref.replace("@", "-") / _variant_stem(variant)


def _identity(parent_ref: str, variant: str | Path, store_root: Any) -> dict[str, str]:
    store = str(store_root) if "://" in str(store_root) else str(Path(str(store_root)).resolve())  # a folder or a database URL
    return {"parent": parent_ref, "variant": str(Path(str(variant)).resolve()), "store": store}


def claim_run_folder(folder: Path) -> Path:
    """Create and return ``folder/run-<K>`` with the next free K (an exclusive mkdir: two runs never share one)."""
    folder.mkdir(parents=True, exist_ok=True)
    k = 1 + max((int(p.name[4:]) for p in folder.glob("run-*") if p.name[4:].isdigit()), default=0)
    while True:
        try:
            (folder / f"run-{k}").mkdir()
            return folder / f"run-{k}"
        except FileExistsError:  # another run claimed it first
            k += 1


def new_run(parent_ref: str, variant: str | Path, *, store_root: Any, seed: int, root: Path = DEFAULT_ROOT) -> RetrainRun:
    """Claim ``run-<K>`` (the next free K) for a new retrain and write its ``run.json``."""
    run = RetrainRun(claim_run_folder(_runs_folder(parent_ref, variant, root)), resumed=False)
    record = {**_identity(parent_ref, variant, store_root), "seed": seed, "started_at": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
    (run.folder / RUN_FILE).write_text(json.dumps(record, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    return run


def find_run_to_resume(parent_ref: str, variant: str | Path, *, store_root: Any, root: Path = DEFAULT_ROOT) -> RetrainRun:
    """The newest unfinished run of this parent, variant and store that holds a checkpoint."""
    folder = _runs_folder(parent_ref, variant, root)
    wanted = _identity(parent_ref, variant, store_root)
    candidates = []
    for run_dir in folder.glob("run-*") if folder.is_dir() else ():
        record = _read_record(run_dir)
        same = record is not None and all(record.get(k) == v for k, v in wanted.items())
        if same and "finished_child" not in record and _checkpoint_pointer(run_dir).exists():
            candidates.append(run_dir)
    if not candidates:
        raise InvalidInputError(
            f"--resume: no interrupted retrain of {parent_ref} on {_variant_stem(variant)} for this store under {folder}; "
            "start a new run without --resume, or give the run's folder with --out"
        )
    newest = max(candidates, key=lambda p: (os.stat(_checkpoint_pointer(p)).st_mtime, p.name))
    return RetrainRun(newest, resumed=True)


def explicit_run(out_dir: str | Path, *, resume: bool) -> RetrainRun:
    """A run in a folder the user named (``--out``): resume there, or start there when it has no checkpoint."""
    folder = Path(out_dir)
    has_checkpoint = _checkpoint_pointer(folder).exists()
    if resume and not has_checkpoint:
        raise InvalidInputError(f"--resume: {folder} holds no checkpoint to continue; drop --resume to start a run there")
    if not resume and has_checkpoint:
        raise InvalidInputError(
            f"--out {folder} already holds a retrain checkpoint; add --resume to continue it, or choose another folder"
        )
    folder.mkdir(parents=True, exist_ok=True)
    return RetrainRun(folder, resumed=resume)


def open_run(parent_ref: str, variant: str | Path, *, store_root: Any, out: str | Path | None, resume: bool, seed: int) -> RetrainRun:
    """The run folder of one retrain: ``out`` when given, else the latest unfinished run to resume, else a new one."""
    if out is not None:
        return explicit_run(out, resume=resume)
    if resume:
        return find_run_to_resume(parent_ref, variant, store_root=store_root)
    return new_run(parent_ref, variant, store_root=store_root, seed=seed)


def mark_finished(run: RetrainRun, child_ref: str) -> None:
    """Record the child in ``run.json`` so ``--resume`` no longer offers this run."""
    record = _read_record(run.folder) or {}
    record.update({"finished_child": child_ref, "finished_at": time.strftime("%Y-%m-%dT%H:%M:%S%z")})
    (run.folder / RUN_FILE).write_text(json.dumps(record, indent=2, sort_keys=True) + "\n", encoding="utf-8")


def _checkpoint_pointer(run_dir: Path) -> Path:
    from kinetome.trainers.checkpoint import POINTER  # lazy: trainers load only for training

    return RetrainRun(run_dir, resumed=False).checkpoint_dir / POINTER


def _read_record(run_dir: Path) -> dict[str, Any] | None:
    try:
        data = json.loads((run_dir / RUN_FILE).read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        return None
    return data if isinstance(data, dict) else None
