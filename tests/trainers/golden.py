"""Digests of trainer outputs, pinned in ``golden_trainer.json`` so a refactor can prove it changed nothing.

Each scenario reduces to ``{label: sha256-prefix}`` over exact bytes (dtype,
shape and data of arrays; ``repr`` of floats in curve rows), so a mismatch
names the quantity that drifted. Mappings are digested by their values in
order, so renamed settings and columns keep their digests. Pin again with ``KINETOME_PIN_GOLDEN=1``
only in a commit that changes behaviour on purpose, and say so there.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import torch

__all__ = ["digest", "module_digest", "rows_digest", "check_golden"]

GOLDEN_FILE = Path(__file__).with_name("golden_trainer.json")
_TIMING = {"steps_per_s"}  # wall-clock columns vary run to run


def digest(value: Any) -> str:
    """sha256 (first 16 hex digits) of an array, tensor, bytes or JSON-able value."""
    h = hashlib.sha256()
    if isinstance(value, torch.Tensor):
        value = value.detach().numpy()
    if isinstance(value, np.ndarray):
        h.update(f"{value.dtype.str}{value.shape}".encode())
        h.update(np.ascontiguousarray(value).tobytes())
    elif isinstance(value, bytes):
        h.update(value)
    elif isinstance(value, Mapping) and any(isinstance(v, (np.ndarray, torch.Tensor)) for v in value.values()):
        for key in sorted(value):  # tensor files: sorted names, as safetensors stores them
            h.update(f"{key}={digest(value[key])};".encode())
    else:
        h.update(json.dumps(_values(value)).encode())
    return h.hexdigest()[:16]


def _values(value: Any) -> Any:
    """Mappings as their values in insertion order: renaming a key leaves the digest alone."""
    if isinstance(value, Mapping):
        return [_values(v) for v in value.values()]
    if isinstance(value, (list, tuple)):
        return [_values(v) for v in value]
    return value


def module_digest(module: torch.nn.Module) -> str:
    h = hashlib.sha256()
    for name, tensor in sorted(module.state_dict().items()):
        h.update(name.encode())
        h.update(digest(tensor).encode())
    return h.hexdigest()[:16]


def rows_digest(rows: list[Mapping[str, Any]]) -> str:
    return digest([{k: v for k, v in r.items() if k not in _TIMING} for r in rows])


def check_golden(name: str, observed: Mapping[str, str]) -> None:
    """Compare ``observed`` with the pinned digests of scenario ``name`` (or pin them)."""
    pinned = json.loads(GOLDEN_FILE.read_text()) if GOLDEN_FILE.exists() else {}
    if os.environ.get("KINETOME_PIN_GOLDEN") == "1":
        pinned[name] = dict(observed)
        GOLDEN_FILE.write_text(json.dumps(pinned, indent=1, sort_keys=True) + "\n")
        return
    assert name in pinned, f"no golden digests for {name}; pin them with KINETOME_PIN_GOLDEN=1"
    expected = pinned[name]
    drifted = sorted(k for k in set(expected) | set(observed) if expected.get(k) != observed.get(k))
    assert not drifted, f"{name}: outputs changed for {drifted}"
