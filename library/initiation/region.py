"""Box regions over clause columns, and the peeling path that proposes them.

A ``Region`` is a conjunction of bounds (``low <= column <= high``; a norm column
has an upper bound only). ``peel_path`` shrinks the sampled box one small slice
at a time, always cutting the slice whose removal raises the mean predicted
success inside most (top-down peeling, Friedman & Fisher 1999, "Bump hunting in
high-dimensional data", Statistics and Computing 9), which gives a sequence of
ever tighter boxes; ``few_clauses`` keeps at most k bounds of each. Pure numpy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .columns import Column, number_text

__all__ = ["Bound", "Region", "peel_path", "peel_fraction", "few_clauses", "round_bound"]


def round_bound(value: float, spread: float, *, outward: str) -> float:
    """``value`` rounded to about 1/1000 of the column's spread (at least 4 significant digits), away from the region."""
    step = 10.0 ** np.floor(np.log10(spread / 1000.0)) if spread > 0 else 1e-6
    rounded = np.floor(value / step) * step if outward == "down" else np.ceil(value / step) * step
    return float(np.round(rounded, 12))


@dataclass(frozen=True)
class Bound:
    """``low <= column <= high``; either side may be None (unbounded)."""

    column: Column
    low: float | None
    high: float | None

    def __post_init__(self) -> None:
        if self.low is None and self.high is None:
            raise ValueError(f"a bound on {self.column.text} needs a low or a high value, got neither")
        if self.column.is_norm and self.low is not None:
            raise ValueError(f"{self.column.text} takes an upper bound only (a ball), got low={self.low}")

    @property
    def text(self) -> str:
        c = self.column.text
        if self.low is not None and self.high is not None:
            return f"{number_text(self.low)} <= {c} <= {number_text(self.high)}"
        if self.low is not None:
            return f"{c} >= {number_text(self.low)}"
        return f"{c} <= {number_text(self.high)}"

    def holds(self, values: np.ndarray) -> np.ndarray:
        ok = np.ones(values.shape[0], dtype=bool)
        if self.low is not None:
            ok &= values >= self.low
        if self.high is not None:
            ok &= values <= self.high
        return ok


@dataclass(frozen=True)
class Region:
    """A conjunction of bounds; no bounds means every sampled state."""

    bounds: tuple[Bound, ...] = ()

    @property
    def text(self) -> str:
        return " and ".join(b.text for b in self.bounds)

    @property
    def size(self) -> int:
        return len(self.bounds)

    def holds(self, columns: Sequence[Column], matrix: np.ndarray) -> np.ndarray:
        """(n,) membership of rows of ``matrix`` (columns in the order of ``columns``)."""
        where = {c: j for j, c in enumerate(columns)}
        ok = np.ones(matrix.shape[0], dtype=bool)
        for b in self.bounds:
            ok &= b.holds(matrix[:, where[b.column]])
        return ok

    def key(self) -> tuple:
        return tuple((b.column, b.low, b.high) for b in self.bounds)


def _best_cut(x: np.ndarray, order: np.ndarray, target: np.ndarray, inside: np.ndarray, two_sided: Sequence[bool], alpha: float):
    """(mean inside after the cut, column, side, threshold) of the best slice to cut, or None.

    ``order`` (n, m): each column's row order by value, computed once (rows inside keep that order).
    """
    n_in = int(inside.sum())
    k = max(1, int(np.floor(alpha * n_in)))
    total = float(np.sum(target[inside]))
    best = None
    for j in range(x.shape[1]):
        rows = order[:, j][inside[order[:, j]]]
        v = x[rows, j]
        for side in (("low", "high") if two_sided[j] else ("high",)):
            idx = rows if side == "low" else rows[::-1]
            vals = v if side == "low" else v[::-1]
            if k >= n_in or vals[k - 1] == vals[k]:
                continue  # a tie across the cut: this slice cannot be separated
            mean = (total - float(np.sum(target[idx[:k]]))) / (n_in - k)
            if best is None or mean > best[0] + 1e-12:
                best = (mean, j, side, 0.5 * (vals[k - 1] + vals[k]))
    return best


def peel_fraction(n: int) -> float:
    """Share of the rows inside cut per step: 1/sqrt(n) within [0.005, 0.05], so the box edges
    get finer as episodes grow (0.05 is the usual fixed choice, common practice)."""
    return float(np.clip(1.0 / np.sqrt(max(n, 1)), 0.005, 0.05))


def peel_path(
    x: np.ndarray, target: np.ndarray, two_sided: Sequence[bool], *, alpha: float | None = None, min_support: int = 20
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Boxes (low (m,), high (m,); +-inf where unbounded) from the whole sample down to ``min_support`` rows.

    ``x`` (n, m) column values, ``target`` (n,) what to raise inside the box (predicted or observed
    success). Each step cuts ``alpha`` (default ``peel_fraction(n)``) of the rows inside on one side
    of one column.
    """
    n, m = x.shape
    alpha = peel_fraction(n) if alpha is None else alpha
    low, high = np.full(m, -np.inf), np.full(m, np.inf)
    inside = np.ones(n, dtype=bool)
    order = np.argsort(x, axis=0, kind="stable")
    path = [(low.copy(), high.copy())]
    current = float(np.mean(target)) if n else 0.0
    while m and inside.sum() > max(min_support, 1):
        cut = _best_cut(x, order, target, inside, two_sided, alpha)
        if cut is None or cut[0] <= current + 1e-12:
            break
        current, j, side, threshold = cut
        if side == "low":
            low[j] = threshold
            inside &= x[:, j] > threshold
        else:
            high[j] = threshold
            inside &= x[:, j] < threshold
        path.append((low.copy(), high.copy()))
    return path


def _region(columns: Sequence[Column], low: np.ndarray, high: np.ndarray, keep: Sequence[int], spread: np.ndarray) -> Region:
    bounds = []
    for j in sorted(keep):
        lo = None if not np.isfinite(low[j]) else round_bound(low[j], spread[j], outward="down")
        hi = None if not np.isfinite(high[j]) else round_bound(high[j], spread[j], outward="up")
        bounds.append(Bound(columns[j], lo, hi))
    return Region(tuple(bounds))


def few_clauses(
    columns: Sequence[Column], box: tuple[np.ndarray, np.ndarray], x: np.ndarray, target: np.ndarray, *, max_clauses: int
) -> Region:
    """The box with at most ``max_clauses`` bounded columns: drop, one at a time, the column whose
    bounds matter least (the mean ``target`` inside stays highest without them); also drop any
    column whose bounds do not raise that mean at all."""
    low, high = box
    keep = [j for j in range(len(columns)) if np.isfinite(low[j]) or np.isfinite(high[j])]
    within = {j: (x[:, j] > low[j]) & (x[:, j] < high[j]) for j in keep}

    while keep:
        count = np.sum([within[j] for j in keep], axis=0)
        full = count == len(keep)
        base = float(np.mean(target[full])) if np.any(full) else -np.inf
        scores = []
        for j in keep:
            ok = (count - within[j]) == len(keep) - 1
            scores.append((float(np.mean(target[ok])) if np.any(ok) else -np.inf, j))
        best_mean, best_j = max(scores)
        if len(keep) > max_clauses or best_mean >= base - 1e-12:
            keep.remove(best_j)
        else:
            break
    spread = np.ptp(x, axis=0) if x.size else np.ones(len(columns))
    return _region(columns, low, high, keep, spread)
