"""Held-out error measures of option models: R^2, RMSE, log loss, Brier score, interval coverage."""

from __future__ import annotations

import numpy as np

__all__ = ["regression_errors", "classification_errors", "interval_coverage", "CONSTANT_TOL"]

# A held-out target whose variance is below CONSTANT_TOL * (1 + mean^2) counts as
# constant: R^2 = 1 - SSE/SST is then undefined (0/0) and only the RMSE is reported.
CONSTANT_TOL = 1e-12


def regression_errors(y_true: np.ndarray, y_pred: np.ndarray) -> dict:
    """{"r2": float | None, "rmse": float, "n": int, "note"?} for one target.

    R^2 = 1 - sum (y - yhat)^2 / sum (y - mean y)^2 on the held-out rows; None
    (with a note) when the held-out target is constant.
    """
    y_true = np.asarray(y_true, dtype=np.float64).ravel()
    y_pred = np.asarray(y_pred, dtype=np.float64).ravel()
    if y_true.shape != y_pred.shape or y_true.size == 0:
        raise ValueError(f"targets and predictions must be equal non-empty shapes, got {y_true.shape} and {y_pred.shape}")
    sse = float(np.sum((y_true - y_pred) ** 2))
    mean = float(np.mean(y_true))
    sst = float(np.sum((y_true - mean) ** 2))
    out: dict = {"n": int(y_true.size), "rmse": float(np.sqrt(sse / y_true.size))}
    if sst <= CONSTANT_TOL * (1.0 + mean * mean) * y_true.size:
        out["r2"] = None
        out["note"] = "held-out target is constant; R^2 undefined, see rmse"
    else:
        out["r2"] = 1.0 - sse / sst
    return out


def classification_errors(labels: np.ndarray, probs: np.ndarray, classes: tuple[int, ...], *, baseline: np.ndarray | None = None) -> dict:
    """Mean log loss and multi-class Brier score of predicted class probabilities.

    ``labels`` (n,) class codes; ``probs`` (n, K) in the order of ``classes``.
    A held-out label outside ``classes`` has predicted probability 0: its log
    loss term is capped at -log(1e-15). ``baseline`` (K,) gives the scores of a
    constant predictor (e.g. training frequencies) for comparison.
    """
    labels = np.asarray(labels).ravel()
    n = labels.size
    if n == 0 or probs.shape[0] != n:
        raise ValueError(f"labels and probabilities must have the same non-zero row count, got {n} and {probs.shape[0]}")
    onehot = np.zeros_like(probs)
    for k, c in enumerate(classes):
        onehot[labels == c, k] = 1.0
    seen = onehot.sum(axis=1) > 0
    p_true = np.where(seen, np.sum(onehot * probs, axis=1), 0.0)
    log_loss = float(np.mean(-np.log(np.clip(p_true, 1e-15, 1.0))))
    # Brier (1950): sum over classes of (p - y)^2; an unseen label adds 1 for its own class.
    brier = float(np.mean(np.sum((probs - onehot) ** 2, axis=1) + (~seen)))
    out = {"n": n, "log_loss": log_loss, "brier": brier}
    if baseline is not None:
        base = classification_errors(labels, np.broadcast_to(baseline, probs.shape).copy(), classes)
        out["baseline_log_loss"] = base["log_loss"]
        out["baseline_brier"] = base["brier"]
    return out


def interval_coverage(low: np.ndarray, high: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(d,) fraction of rows of ``y`` (n, d) with low <= y <= high per component."""
    inside = (y >= low) & (y <= high)
    return inside.mean(axis=0)
