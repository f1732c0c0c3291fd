"""Read safetensors bytes into nested lists with the standard library only.

``kinetome show`` must stay fast and must not import numpy or torch; the
safetensors layout is simple (an 8-byte little-endian header length, a JSON
header of dtype/shape/offsets, then raw little-endian data), so we read it
directly. Never used to load anything but numbers.
"""

from __future__ import annotations

import json
import struct
from array import array
from typing import Any

__all__ = ["read_tensors"]

_TYPECODES = {"F64": "d", "F32": "f", "I64": "q", "I32": "i", "I16": "h", "I8": "b", "U8": "B", "BOOL": "B"}
_MAX_HEADER = 100 * 1024 * 1024


def _nest(flat: list, shape: list[int]) -> Any:
    if not shape:
        return flat[0]
    if len(shape) == 1:
        return flat
    step = len(flat) // shape[0]
    return [_nest(flat[i * step : (i + 1) * step], shape[1:]) for i in range(shape[0])]


def read_tensors(data: bytes) -> dict[str, Any]:
    """name -> nested list of numbers, for every tensor in a safetensors blob."""
    if len(data) < 8:
        raise ValueError("safetensors data must be at least 8 bytes")
    (header_len,) = struct.unpack("<Q", data[:8])
    if header_len > min(_MAX_HEADER, len(data) - 8):
        raise ValueError(f"safetensors header length {header_len} exceeds the data")
    header = json.loads(data[8 : 8 + header_len].decode("utf-8"))
    body = memoryview(data)[8 + header_len :]
    out: dict[str, Any] = {}
    for name, info in sorted(header.items()):
        if name == "__metadata__":
            continue
        code = _TYPECODES.get(info["dtype"])
        if code is None:
            raise ValueError(f"tensor {name!r} has unsupported dtype {info['dtype']}")
        start, end = info["data_offsets"]
        values = array(code)
        values.frombytes(body[start:end].tobytes())
        if struct.pack("=H", 1) != struct.pack("<H", 1):  # big-endian host
            values.byteswap()
        flat = [bool(v) for v in values] if info["dtype"] == "BOOL" else values.tolist()
        out[name] = _nest(flat, list(info["shape"]))
    return out
