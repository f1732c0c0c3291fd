"""The valid-for region of a sweep: which evaluated cells clear the requirement, corrected across cells.

Pure numbers (scipy only). A cell with k successes in n distinct episodes clears the
requirement P when its one-sided exact (Clopper-Pearson) lower bound, at the corrected
level, is at least P. Two corrections across the m cells:

- ``holm`` (Holm-Bonferroni, step-down): cells in order of their one-sided exact binomial
  p-value P(X >= k | n, P); the cell of rank r (0-based) is tested at alpha / (m - r), and
  only while every cell before it passed. Controls the family-wise error at alpha.
- ``bonferroni``: every cell at alpha / m (a simultaneous bound on all cells).

A cell is ``pass`` (in the region), ``fail`` when its one-sided exact upper bound at
alpha / m (Bonferroni, both methods) is below P, else ``unsure``. No interpolation: only
evaluated cells count, and membership asks for exactly a passing cell's task.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

__all__ = [
    "CORRECTIONS",
    "CellMark",
    "one_sided_p_value",
    "mark_cells",
    "correction_text",
    "same_task",
]

CORRECTIONS = ("holm", "bonferroni")
PASS, FAIL, UNSURE = "pass", "fail", "unsure"


@dataclass(frozen=True)
class CellMark:
    """One cell's statistics: two-sided interval, p-value, the corrected one-sided bounds, the mark."""

    successes: int
    episodes: int
    interval: tuple[float, float]
    p_value: float
    level: float  # the one-sided alpha this cell's lower bound was taken at
    corrected_lower: float
    corrected_upper: float
    mark: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "successes": self.successes,
            "episodes": self.episodes,
            "success_rate": self.successes / self.episodes if self.episodes else None,
            "interval": list(self.interval),
            "p_value": self.p_value,
            "level": self.level,
            "corrected_lower": self.corrected_lower,
            "corrected_upper": self.corrected_upper,
            "mark": self.mark,
        }


def one_sided_p_value(k: int, n: int, require: float) -> float:
    """Exact one-sided binomial p-value of H0: p < require, i.e. P(X >= k) for X ~ Bin(n, require)."""
    if n == 0 or k == 0:
        return 1.0
    from scipy.special import betainc

    # P(X >= k) = I_require(k, n - k + 1), the regularised incomplete beta function.
    return float(betainc(k, n - k + 1, require))


def _levels(p_values: Sequence[float], alpha: float, correction: str) -> list[float]:
    """The one-sided level each cell is tested at."""
    m = len(p_values)
    if correction == "bonferroni":
        return [alpha / m] * m
    order = sorted(range(m), key=lambda i: (p_values[i], i))
    levels = [0.0] * m
    for rank, i in enumerate(order):
        levels[i] = alpha / (m - rank)
    return levels


def _bound(k: int, n: int, level: float, side: str) -> float:
    from ..checker.stats import lower_bound, upper_bound

    if n == 0:
        return 0.0 if side == "lower" else 1.0
    fn = lower_bound if side == "lower" else upper_bound
    return fn(k, n, 1.0 - level)


def mark_cells(counts: Sequence[tuple[int, int]], *, require: float, confidence: float, correction: str) -> list[CellMark]:
    """Marks of every cell from its (successes, distinct episodes); see the module docstring for the rule."""
    if correction not in CORRECTIONS:
        raise ValueError(f"correction must be one of {', '.join(CORRECTIONS)}, got {correction!r}")
    if not counts:
        return []
    alpha = 1.0 - confidence
    m = len(counts)
    p_values = [one_sided_p_value(k, n, require) for k, n in counts]
    levels = _levels(p_values, alpha, correction)
    lowers = [_bound(k, n, lv, "lower") for (k, n), lv in zip(counts, levels)]
    passed = [False] * m
    for i in sorted(range(m), key=lambda i: (p_values[i], i)):
        if lowers[i] < require:
            if correction == "holm":
                break  # step-down: every later cell is retained
            continue
        passed[i] = True
    out = []
    for i, (k, n) in enumerate(counts):
        upper = _bound(k, n, alpha / m, "upper")
        mark = PASS if passed[i] else (FAIL if upper < require else UNSURE)
        from ..checker.stats import clopper_pearson

        interval = clopper_pearson(k, n, confidence) if n else (0.0, 1.0)
        out.append(CellMark(k, n, interval, p_values[i], levels[i], lowers[i], upper, mark))
    return out


def correction_text(correction: str, m: int, confidence: float) -> str:
    """How the cells were corrected, in words (printed with every sweep)."""
    alpha = 1.0 - confidence
    if correction == "bonferroni":
        how = f"Bonferroni: each of the {m} cells' one-sided exact lower bound at alpha {alpha:g}/{m}"
    else:
        how = (f"Holm-Bonferroni step-down over {m} cells: in order of exact one-sided p-value, the r-th cell's "
               f"one-sided exact lower bound at alpha {alpha:g}/({m} - r + 1), while every earlier cell passed")
    return (f"{how}; family-wise error <= {alpha:g}. fail: one-sided exact upper bound at alpha {alpha:g}/{m} "
            "below the requirement; unsure: neither")


def _close(a: Any, b: Any) -> bool:
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_close(x, y) for x, y in zip(a, b))
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool) and not isinstance(b, bool):
        return math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=1e-12)
    return a == b


def same_task(a: Mapping[str, Any], b: Mapping[str, Any]) -> bool:
    """Two tasks (variant fields or disturbances) are the same: the same keys, each value equal up to round-off."""
    return set(a) == set(b) and all(_close(a[k], b[k]) for k in a)
