"""Batch-invariant torch kernels: each row's result is the same bits whatever the batch size.

BLAS matrix products sum in an order that depends on the batch size (a
(1, k) @ (k, m) product and a (B, k) @ (k, m) one may differ in the last
bit), so controllers use these elementwise-then-reduce forms instead.
"""

from __future__ import annotations

import contextlib
from typing import Iterator

import torch

__all__ = ["matvec", "blas_products", "torch_threads", "jacobian_transpose", "flatten_inputs"]

# Rows per chunk keep the (rows, m, k) product under ~4M elements (32 MB).
_CHUNK_ELEMENTS = 1 << 22


@contextlib.contextmanager
def torch_threads(n: int) -> Iterator[None]:
    """Run torch on ``n`` intra-op threads, restoring the previous count after.

    Rollouts and training use one: MuJoCo's pool owns the cores, and torch's own
    workers stall behind it (measured in tests/bench/bench_runtime.py).
    """
    old = torch.get_num_threads()
    torch.set_num_threads(n)
    try:
        yield
    finally:
        torch.set_num_threads(old)


_blas = False  # set inside blas_products(): training needs speed, not batch invariance


@contextlib.contextmanager
def blas_products() -> Iterator[None]:
    """Inside: ``matvec`` uses BLAS (about 20x faster for MLPs, deterministic for a
    given batch shape, but its last bits depend on the batch size). The trainer
    uses it; the runtime does not, so batched runs equal the one-env loop."""
    global _blas
    previous, _blas = _blas, True
    try:
        yield
    finally:
        _blas = previous


def matvec(x: torch.Tensor, weight: torch.Tensor) -> torch.Tensor:
    """``x @ weight.T`` for x (B, k), weight (m, k) -> (B, m), row by row (see blas_products)."""
    if _blas:
        return torch.nn.functional.linear(x, weight)
    m, k = weight.shape
    rows = max(1, _CHUNK_ELEMENTS // max(1, m * k))
    if x.shape[0] <= rows:
        return (x.unsqueeze(1) * weight).sum(-1)
    return torch.cat([(x[i : i + rows].unsqueeze(1) * weight).sum(-1) for i in range(0, x.shape[0], rows)])


def jacobian_transpose(jac: torch.Tensor, force: torch.Tensor) -> torch.Tensor:
    """``J^T f`` for jac (B, 3, n), force (B, 3) -> (B, n), summed in a fixed order."""
    out = jac[:, 0, :] * force[:, 0:1]
    for r in range(1, jac.shape[1]):
        out = out + jac[:, r, :] * force[:, r : r + 1]
    return out


def flatten_inputs(values: dict[str, torch.Tensor], names: tuple[str, ...]) -> torch.Tensor:
    """Concatenate named quantities (B, *shape) into one (B, n_in) input."""
    batch = values[names[0]].shape[0]
    return torch.cat([values[n].reshape(batch, -1) for n in names], dim=1)
