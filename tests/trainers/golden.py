"""Fingerprints of trainer outputs, pinned in ``golden_trainer.json`` so a refactor can prove it changed nothing.

Each scenario reduces to ``{label: fingerprint}``. Integer, boolean and text data
are kept exactly (a hash); a float array becomes its dtype, shape, sum, sum of
absolute values and a position-weighted sum, compared to a relative 1e-4 of its
size. Bit-for-bit digests of float outputs held only on the CPU they were pinned
on: BLAS and oneDNN pick different kernels per CPU and the last bits move, while
a real change of behaviour moves these sums by far more than 1e-4. Mappings are
fingerprinted by their values in order, so renamed settings and columns keep
theirs. Pin again with ``KINETOME_PIN_GOLDEN=1`` only in a commit that changes
behaviour on purpose, and say so there.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import struct
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import torch

__all__ = ["digest", "module_digest", "rows_digest", "check_golden", "RELATIVE_TOLERANCE"]

GOLDEN_FILE = Path(__file__).with_name("golden_trainer.json")
RELATIVE_TOLERANCE = 1e-4  # of an array's sum of absolute values (or of a number's size)
_TIMING = {"steps_per_s"}  # wall-clock columns vary run to run


def _exact(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()[:16]


def _array(value: np.ndarray) -> dict[str, Any]:
    """Exact hash for discrete data; sums (tolerant) for floats."""
    head = {"dtype": value.dtype.str, "shape": list(value.shape)}
    if not np.issubdtype(value.dtype, np.floating):
        return {**head, "exact": _exact(np.ascontiguousarray(value).tobytes())}
    flat = value.astype(np.float64).ravel()
    finite = np.isfinite(flat)
    if not finite.all():  # NaN/inf kept exactly (where and what), the sums over the finite rest
        head["nonfinite"] = _exact(np.flatnonzero(~finite).tobytes() + flat[~finite].tobytes())
        flat = np.where(finite, flat, 0.0)
    weights = np.sin(np.arange(1, flat.size + 1, dtype=np.float64))  # position matters: a shuffle changes this sum
    return {**head, "sum": float(flat.sum()), "abs": float(np.abs(flat).sum()), "weighted": float(flat @ weights)}


def _tensor_file(data: bytes) -> dict[str, Any] | None:
    """A safetensors file's tensors by name, or None when ``data`` is not one."""
    if len(data) < 8:
        return None
    (size,) = struct.unpack("<Q", data[:8])
    if size > len(data) - 8:
        return None
    try:
        header = json.loads(data[8 : 8 + size])
    except (UnicodeDecodeError, json.JSONDecodeError):
        return None
    if not isinstance(header, dict):
        return None
    from safetensors.numpy import load

    return {name: _array(arr) for name, arr in sorted(load(data).items())}


def digest(value: Any) -> Any:
    """JSON-able fingerprint of an array, tensor, bytes (safetensors, JSON or other) or JSON-able value."""
    if isinstance(value, torch.Tensor):
        value = value.detach().numpy()
    if isinstance(value, np.ndarray):
        return _array(value)
    if isinstance(value, bytes):
        tensors = _tensor_file(value)
        if tensors is not None:
            return {"tensors": tensors}
        try:
            return {"json": _values(json.loads(value))}
        except (UnicodeDecodeError, json.JSONDecodeError):
            return {"exact": _exact(value)}
    if isinstance(value, Mapping) and any(isinstance(v, (np.ndarray, torch.Tensor)) for v in value.values()):
        return {"tensors": {key: digest(value[key]) for key in sorted(value)}}  # sorted, as safetensors stores them
    return {"json": _values(value)}


def _values(value: Any) -> Any:
    """Mappings as their values in insertion order: renaming a key leaves the fingerprint alone."""
    if isinstance(value, Mapping):
        return [_values(v) for v in value.values()]
    if isinstance(value, (list, tuple)):
        return [_values(v) for v in value]
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return repr(value)
    return value


def module_digest(module: torch.nn.Module) -> Any:
    return {"tensors": {name: digest(tensor) for name, tensor in sorted(module.state_dict().items())}}


def rows_digest(rows: list[Mapping[str, Any]]) -> Any:
    return digest([{k: v for k, v in r.items() if k not in _TIMING} for r in rows])


def differences(expected: Any, observed: Any, where: str = "") -> list[str]:
    """Where two fingerprints differ beyond the tolerance (empty when they agree)."""
    if isinstance(expected, dict) and "abs" in expected and isinstance(observed, dict) and "abs" in observed:
        if (expected["dtype"], expected["shape"]) != (observed["dtype"], observed["shape"]):
            return [f"{where}: {expected['dtype']}{expected['shape']} != {observed['dtype']}{observed['shape']}"]
        if expected.get("nonfinite") != observed.get("nonfinite"):
            return [f"{where}: NaN/inf entries differ"]
        allowed = RELATIVE_TOLERANCE * max(expected["abs"], observed["abs"]) + 1e-12
        return [f"{where}.{k}: {expected[k]!r} != {observed[k]!r}" for k in ("sum", "abs", "weighted")
                if abs(expected[k] - observed[k]) > allowed]
    if isinstance(expected, dict) and isinstance(observed, dict):
        if sorted(expected) != sorted(observed):
            return [f"{where}: keys {sorted(expected)} != {sorted(observed)}"]
        return [d for k in sorted(expected) for d in differences(expected[k], observed[k], f"{where}.{k}" if where else k)]
    if isinstance(expected, list) and isinstance(observed, list):
        if len(expected) != len(observed):
            return [f"{where}: {len(expected)} items != {len(observed)}"]
        return [d for i, (e, o) in enumerate(zip(expected, observed)) for d in differences(e, o, f"{where}[{i}]")]
    both_numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (expected, observed))
    if both_numbers and (isinstance(expected, float) or isinstance(observed, float)):
        if math.isnan(expected) or math.isnan(observed):  # a NaN never passes a tolerance test: match it exactly
            return [] if math.isnan(expected) and math.isnan(observed) else [f"{where}: {expected!r} != {observed!r}"]
        ok = math.isclose(expected, observed, rel_tol=RELATIVE_TOLERANCE, abs_tol=1e-9)
        return [] if ok else [f"{where}: {expected!r} != {observed!r}"]
    return [] if expected == observed else [f"{where}: {expected!r} != {observed!r}"]


def check_golden(name: str, observed: Mapping[str, Any]) -> None:
    """Compare ``observed`` with the pinned fingerprints of scenario ``name`` (or pin them)."""
    pinned = json.loads(GOLDEN_FILE.read_text()) if GOLDEN_FILE.exists() else {}
    observed = json.loads(json.dumps(dict(observed)))  # as stored: tuples become lists
    if os.environ.get("KINETOME_PIN_GOLDEN") == "1":
        pinned[name] = observed
        GOLDEN_FILE.write_text(json.dumps(pinned, indent=1, sort_keys=True) + "\n")
        return
    assert name in pinned, f"no golden fingerprints for {name}; pin them with KINETOME_PIN_GOLDEN=1"
    drifted = differences(pinned[name], observed)
    assert not drifted, f"{name}: outputs changed: " + "; ".join(drifted[:12])
