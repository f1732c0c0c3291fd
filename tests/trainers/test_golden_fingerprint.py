"""The golden fingerprints tolerate last-bit noise from CPU-specific kernels and nothing more."""

from __future__ import annotations

import numpy as np

from .golden import RELATIVE_TOLERANCE, differences, digest


def test_last_bit_noise_passes_and_a_real_change_does_not():
    rng = np.random.default_rng(0)
    values = rng.standard_normal(500)
    pinned = digest(values)
    noisy = values * (1 + 1e-12 * rng.standard_normal(500))  # what another CPU's kernels do
    assert differences(pinned, digest(noisy)) == []
    moved = values.copy()
    moved[17] += 1.0  # one entry of 500 moved by 1: 0.25% of the sum of absolute values, 25 times the tolerance
    assert differences(pinned, digest(moved))
    assert differences(pinned, digest(values[::-1].copy()))  # same sums, other order: the weighted sum sees it


def test_discrete_data_and_text_must_match_exactly():
    steps = np.arange(10)
    assert differences(digest(steps), digest(steps.copy())) == []
    other = steps.copy()
    other[3] += 1
    assert differences(digest(steps), digest(other))
    assert differences(digest({"method": "search", "env_steps": 4096}), digest({"method": "search", "env_steps": 4097}))
    assert differences(digest({"rate": 0.5}), digest({"rate": 0.5 * (1 + 1e-9)})) == []


def test_safetensors_bytes_are_compared_by_tensor():
    from safetensors.numpy import save

    a = {"w": np.linspace(-1, 1, 12).reshape(3, 4), "n": np.array([3], dtype=np.int64)}
    b = {"w": a["w"] + 1e-15, "n": a["n"]}
    assert differences(digest(save(a)), digest(save(b))) == []
    assert differences(digest(save(a)), digest(save({**a, "n": np.array([4], dtype=np.int64)})))


def test_nan_entries_must_match_and_do_not_blind_the_sums():
    values = np.array([1.0, np.nan, 3.0, -2.0])
    assert differences(digest(values), digest(values.copy())) == []
    assert differences(digest(values), digest(np.array([1.0, np.nan, 3.5, -2.0])))  # a NaN elsewhere still compares the rest
    assert differences(digest(values), digest(np.array([1.0, 2.0, 3.0, -2.0])))
    assert differences(digest({"loss": float("nan")}), digest({"loss": 0.5}))
