"""Crash-safe training checkpoints: safetensors for arrays, JSON for counters and RNG states.

A checkpoint directory holds ``state-<update>.safetensors`` and a pointer
``checkpoint.json`` naming it with its sha256. Both are written to a temp file
and renamed (``os.replace``), the pointer last, so a kill at any moment leaves
the previous checkpoint intact. Nothing is pickled.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

import numpy as np
import torch

from kinetome.library.errors import TrainingError

from .atomic import write_atomic

__all__ = [
    "POINTER",
    "save_checkpoint",
    "load_checkpoint",
    "module_tensors",
    "load_module_tensors",
    "optimiser_tensors",
    "load_optimiser_tensors",
    "generator_state",
    "set_generator_state",
]

POINTER = "checkpoint.json"
_FORMAT = "kinetome-train-checkpoint/1"


def save_checkpoint(directory: str | Path, *, update: int, tensors: dict[str, np.ndarray], meta: dict[str, Any]) -> Path:
    """Write one checkpoint; older state files are removed once the pointer names the new one."""
    from safetensors.numpy import save

    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    data = save({k: np.ascontiguousarray(v) for k, v in tensors.items()})
    name = f"state-{update:07d}.safetensors"
    write_atomic(directory / name, data)
    pointer = {
        "format": _FORMAT,
        "update": update,
        "tensors": name,
        "sha256": hashlib.sha256(data).hexdigest(),
        "meta": meta,
    }
    write_atomic(directory / POINTER, json.dumps(pointer, indent=1, sort_keys=True).encode("utf-8"))
    for old in directory.glob("state-*.safetensors"):
        if old.name != name:
            old.unlink(missing_ok=True)
    return directory / name


def load_checkpoint(directory: str | Path) -> tuple[dict[str, np.ndarray], dict[str, Any]] | None:
    """(tensors, meta) of the last complete checkpoint, or None when there is none."""
    from safetensors.numpy import load

    directory = Path(directory)
    pointer_path = directory / POINTER
    if not pointer_path.exists():
        return None
    try:
        pointer = json.loads(pointer_path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise TrainingError(f"checkpoint pointer {pointer_path} must be JSON, got unreadable content ({exc}); delete the folder to start over") from None
    if pointer.get("format") != _FORMAT:
        raise TrainingError(f"checkpoint {pointer_path} must have format {_FORMAT}, got {pointer.get('format')!r}")
    path = directory / str(pointer["tensors"])
    if path.name != pointer["tensors"] or not path.exists():
        raise TrainingError(f"checkpoint state {path} named by {pointer_path} is missing; delete the folder to start over")
    data = path.read_bytes()
    digest = hashlib.sha256(data).hexdigest()
    if digest != pointer["sha256"]:
        raise TrainingError(f"checkpoint state {path} must have sha256 {pointer['sha256']}, got {digest}; the file is damaged")
    return load(data), pointer["meta"]


def module_tensors(prefix: str, module: torch.nn.Module) -> dict[str, np.ndarray]:
    return {f"{prefix}.{k}": v.detach().cpu().numpy().copy() for k, v in module.state_dict().items()}


def load_module_tensors(prefix: str, module: torch.nn.Module, tensors: dict[str, np.ndarray]) -> None:
    own = module.state_dict()
    missing = [k for k in own if f"{prefix}.{k}" not in tensors]
    if missing:
        raise TrainingError(f"checkpoint must hold {prefix}.{missing[0]}, got no such tensor; it was written for another model")
    module.load_state_dict({k: torch.from_numpy(np.array(tensors[f"{prefix}.{k}"])) for k in own})


def optimiser_tensors(prefix: str, optimiser: torch.optim.Optimizer) -> tuple[dict[str, np.ndarray], list[dict[str, Any]]]:
    """Per-parameter state as arrays plus the JSON-able param groups."""
    sd = optimiser.state_dict()
    out: dict[str, np.ndarray] = {}
    for index, state in sd["state"].items():
        for key, value in state.items():
            arr = value.detach().cpu().numpy() if isinstance(value, torch.Tensor) else np.asarray(value)
            out[f"{prefix}.{index}.{key}"] = np.array(arr, copy=True)
    return out, sd["param_groups"]


def load_optimiser_tensors(prefix: str, optimiser: torch.optim.Optimizer, tensors: dict[str, np.ndarray], groups: list[dict[str, Any]]) -> None:
    state: dict[int, dict[str, torch.Tensor]] = {}
    head = f"{prefix}."
    for name, arr in tensors.items():
        if not name.startswith(head):
            continue
        index, key = name[len(head):].split(".", 1)
        state.setdefault(int(index), {})[key] = torch.from_numpy(np.array(arr))
    optimiser.load_state_dict({"state": state, "param_groups": groups})


def generator_state(gen: torch.Generator) -> np.ndarray:
    return gen.get_state().numpy().copy()


def set_generator_state(gen: torch.Generator, state: np.ndarray) -> None:
    gen.set_state(torch.from_numpy(np.array(state, dtype=np.uint8)))
