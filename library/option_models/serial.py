"""File format of option models: one JSON metadata file and one safetensors array file per model."""

from __future__ import annotations

import json
from typing import Any, Mapping

import numpy as np

from kinetome.library.errors import InvalidInputError, Problem

__all__ = ["FORMAT", "pack", "unpack", "file_error"]

FORMAT = "kinetome.option_models/1"


def file_error(source: str, field: str, message: str, fix: str = "") -> InvalidInputError:
    """The error every loader raises: which file, which entry, what is wrong, how to fix it."""
    return InvalidInputError([Problem(source, None, field, message, fix)])


def pack(kind: str, meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray]) -> dict[str, bytes]:
    """``{kind}.json`` (metadata plus the shape of every array) and ``{kind}.safetensors``.

    Arrays are stored as float64; JSON is written with sorted keys and exact
    float repr, so packing the loaded result again gives identical bytes.
    """
    from safetensors.numpy import save

    tensors = {name: np.ascontiguousarray(value, dtype=np.float64) for name, value in arrays.items()}
    header = {
        "format": FORMAT,
        "kind": kind,
        "meta": dict(meta),
        "arrays": {name: list(t.shape) for name, t in sorted(tensors.items())},
    }
    try:
        text = json.dumps(header, sort_keys=True, indent=2, allow_nan=False)
    except ValueError as exc:  # NaN/Inf in metadata
        raise ValueError(f"{kind} metadata must be finite JSON numbers (use null for undefined): {exc}") from None
    return {f"{kind}.json": (text + "\n").encode(), f"{kind}.safetensors": save(tensors)}


def unpack(files: Mapping[str, bytes], kind: str) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read and check what ``pack`` wrote: (meta, arrays). Raises InvalidInputError."""
    from safetensors.numpy import load

    json_name, st_name = f"{kind}.json", f"{kind}.safetensors"
    for name in (json_name, st_name):
        if name not in files:
            raise file_error(
                name, "", f"file is missing; got files {sorted(files)}",
                "pass every file that to_files() wrote",
            )
    try:
        header = json.loads(bytes(files[json_name]).decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise file_error(json_name, "", f"is not valid JSON ({exc})", "re-export the model") from None
    if not isinstance(header, dict):
        raise file_error(json_name, "", f"must hold a JSON object, got {type(header).__name__}")
    if header.get("format") != FORMAT:
        raise file_error(
            json_name, "format", f"must be {FORMAT!r}, got {header.get('format')!r}",
            "refit the models with this version of kinetome",
        )
    if header.get("kind") != kind:
        raise file_error(json_name, "kind", f"must be {kind!r}, got {header.get('kind')!r}")
    declared = header.get("arrays")
    meta = header.get("meta")
    if not isinstance(declared, dict) or not isinstance(meta, dict):
        raise file_error(json_name, "arrays", "header needs the objects 'arrays' and 'meta'", "re-export the model")
    try:
        arrays = load(bytes(files[st_name]))
    except Exception as exc:  # safetensors raises its own error type for corrupt bytes
        raise file_error(st_name, "", f"is not a readable safetensors file ({exc})", "re-export the model") from None
    missing = sorted(set(declared) - set(arrays))
    extra = sorted(set(arrays) - set(declared))
    if missing or extra:
        raise file_error(
            st_name, "", f"arrays must match {json_name}; missing {missing}, unexpected {extra}",
            "the two files come from different exports; pass a matching pair",
        )
    for name, value in arrays.items():
        if value.dtype != np.float64:
            raise file_error(st_name, name, f"must be float64, got {value.dtype}")
        if list(value.shape) != declared[name]:
            raise file_error(
                st_name, name, f"must have shape {tuple(declared[name])} as {json_name} declares, got {value.shape}",
                "the two files come from different exports; pass a matching pair",
            )
    return meta, arrays
