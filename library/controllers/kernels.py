"""Batch-invariant torch kernels: each row's result is the same bits whatever the batch size.

BLAS matrix products sum in an order that depends on the batch size (a
(1, k) @ (k, m) product and a (B, k) @ (k, m) one may differ in the last
bit), so controllers use these elementwise-then-reduce forms instead.
"""

from __future__ import annotations

import torch

__all__ = ["matvec", "jacobian_transpose", "flatten_inputs"]

# Rows per chunk keep the (rows, m, k) product under ~4M elements (32 MB).
_CHUNK_ELEMENTS = 1 << 22


def matvec(x: torch.Tensor, weight: torch.Tensor) -> torch.Tensor:
    """``x @ weight.T`` for x (B, k), weight (m, k) -> (B, m), row by row."""
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
