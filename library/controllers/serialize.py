"""Controller parameters as safetensors bytes (never pickle)."""

from __future__ import annotations

import json
import struct
from typing import Any

import numpy as np
import safetensors.numpy

from .errors import ControllerError, problem

__all__ = ["save_parameters", "parameters_bytes", "load_parameters", "parameters_metadata", "PARAMETERS_FORMAT"]

PARAMETERS_FORMAT = "kinetome.controller.parameters/1"
_FIELD = "controller.parameters"


def save_parameters(controller: Any) -> bytes:
    """Every parameter (``log_std`` and fixed normalisers included) as float64 safetensors.

    The metadata records the format and the controller kind.
    """
    return parameters_bytes(controller.parameter_values(), controller.kind)


def parameters_bytes(values: Any, kind: str) -> bytes:
    """``save_parameters`` of a controller of ``kind`` whose parameter values are ``values``
    (name -> array, declaration order), without building it (e.g. from a ``ControllerPlan``)."""
    arrays = {k: np.array(v, dtype=np.float64, order="C") for k, v in values.items()}
    data = safetensors.numpy.save(arrays, metadata={"format": PARAMETERS_FORMAT, "kind": kind})
    return _canonical_header(data)


def _canonical_header(data: bytes) -> bytes:
    """Same tensors -> same bytes: safetensors writes ``__metadata__`` keys in hash order.

    The store deduplicates by content digest, so the header is rewritten with
    sorted keys, padded with spaces to its original length (same keys, same length).
    """
    import json
    import struct

    (length,) = struct.unpack("<Q", data[:8])
    header = json.loads(data[8 : 8 + length])
    meta = header.get("__metadata__")
    if isinstance(meta, dict):
        header["__metadata__"] = dict(sorted(meta.items()))
    text = json.dumps(header, separators=(",", ":")).encode("utf-8")
    if len(text) > length:
        return data
    return data[:8] + text + b" " * (length - len(text)) + data[8 + length :]


def parameters_metadata(data: bytes) -> dict[str, str]:
    """The string metadata stored in a safetensors header (JSON, read without loading tensors)."""
    raw = bytes(data)
    if len(raw) < 8:
        raise ControllerError([problem(_FIELD, f"must be safetensors data, got {len(raw)} bytes", "re-save with save_parameters")])
    (size,) = struct.unpack("<Q", raw[:8])
    if size > len(raw) - 8:
        raise ControllerError([problem(_FIELD, f"must be safetensors data, got a header of {size} bytes in {len(raw)} bytes",
                                       "the file is truncated or not safetensors; re-save with save_parameters")])
    try:
        header = json.loads(raw[8 : 8 + size].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ControllerError([problem(_FIELD, f"must be safetensors data, got an unreadable header ({exc})",
                                       "re-save with save_parameters")]) from None
    meta = header.get("__metadata__") if isinstance(header, dict) else None
    return dict(meta) if isinstance(meta, dict) else {}


def load_parameters(data: bytes, *, kind: str | None = None) -> dict[str, np.ndarray]:
    """name -> float64 array from ``save_parameters`` bytes.

    Names and shapes are checked when applied (``controller.load_values``).
    ``kind``, when given, must match the kind recorded in the file.
    """
    if not isinstance(data, (bytes, bytearray, memoryview)):
        raise ControllerError([problem(_FIELD, f"must be bytes of safetensors data, got {type(data).__name__}",
                                       "read the file in binary mode")])
    meta = parameters_metadata(data)
    stored = meta.get("kind")
    if kind is not None and stored is not None and stored != kind:
        raise ControllerError([problem(_FIELD, f"must hold parameters of kind {kind!r}, got kind {stored!r}",
                                       "load the file saved for this controller")])
    try:
        arrays = safetensors.numpy.load(bytes(data))
    except Exception as exc:  # safetensors raises its own SafetensorError for malformed data
        raise ControllerError([problem(_FIELD, f"must be safetensors data, got an unreadable file ({exc})",
                                       "re-save with save_parameters")]) from None
    out: dict[str, np.ndarray] = {}
    for name, arr in arrays.items():
        if not np.issubdtype(arr.dtype, np.floating):
            raise ControllerError([problem(f"{_FIELD}.{name}", f"must be floating point, got dtype {arr.dtype}",
                                           "store parameters as float64")])
        out[name] = np.array(arr, dtype=np.float64, copy=True)
    return out
