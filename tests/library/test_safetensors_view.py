"""The standard-library safetensors reader used by `kinetome show` agrees with safetensors itself."""

from __future__ import annotations

import numpy as np
import pytest
from safetensors.numpy import save  # reference implementation

from kinetome.library.safetensors_view import read_tensors


@pytest.mark.parametrize("dtype", [np.float64, np.float32, np.int64, np.int32])
def test_matches_reference_library(dtype) -> None:
    rng = np.random.default_rng(3)
    tensors = {
        "matrix": (rng.standard_normal((3, 4)) * 10).astype(dtype),
        "vector": (rng.standard_normal(5) * 10).astype(dtype),
        "scalar": np.array(7, dtype=dtype),
    }
    got = read_tensors(save(tensors))
    for name, value in tensors.items():
        np.testing.assert_array_equal(np.asarray(got[name], dtype=dtype), value)


@pytest.mark.parametrize("data, message", [(b"\x01", "at least 8 bytes"), ((10**9).to_bytes(8, "little") + b"{}", "exceeds the data")])
def test_rejects_damaged_data(data: bytes, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        read_tensors(data)
