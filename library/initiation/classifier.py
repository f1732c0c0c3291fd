"""P(success | start state): logistic regression on the option models' start-state features, or
gradient-boosted trees (scikit-learn) only when they predict better on held-out rows; plus calibration.

Features are those of the option models (``option_models.features.FeatureMap``: named quantities
flattened and standardised; ``poly2`` for up to 12 varying inputs, else random Fourier features). Logistic
regression is fitted by Newton steps with an L2 penalty on the weights (not the intercept); the
penalty is chosen from a grid by log-loss on the choosing split. Calibration: the Brier score
(mean squared error of the probability, Brier 1950) and a reliability curve in ten equal bins.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from ..option_models.features import FeatureMap, flatten_states
from .columns import varying

__all__ = ["Classifier", "fit_classifier", "brier", "reliability", "logistic_fit", "MODELS"]

MODELS = ("logistic", "boosted-trees")
PENALTIES = (1e-4, 1e-3, 1e-2, 1e-1, 1.0)  # L2 strength per row, in standardised units
_POLY2_MAX = 12  # inputs; as the option models' "auto" expansion
_RFF = 200  # random Fourier features beyond 12 inputs
_TREES = 100  # boosting iterations (learning rate 0.1, at most 15 leaves per tree)


def brier(p: np.ndarray, y: np.ndarray) -> float:
    """Mean squared error of predicted probabilities ``p`` against outcomes ``y`` (0/1)."""
    return float(np.mean((np.asarray(p, float) - np.asarray(y, float)) ** 2)) if len(y) else float("nan")


def reliability(p: np.ndarray, y: np.ndarray, *, bins: int = 10) -> list[dict[str, float]]:
    """Per equal-width bin of predicted probability: its range, mean prediction, observed rate and count (empty bins skipped)."""
    p, y = np.asarray(p, float), np.asarray(y, float)
    edges = np.linspace(0.0, 1.0, bins + 1)
    which = np.clip(np.digitize(p, edges[1:-1]), 0, bins - 1)
    out = []
    for b in range(bins):
        rows = which == b
        if np.any(rows):
            out.append({"low": float(edges[b]), "high": float(edges[b + 1]), "predicted": float(p[rows].mean()),
                        "observed": float(y[rows].mean()), "count": int(rows.sum())})
    return out


def _sigmoid(z: np.ndarray) -> np.ndarray:
    return 0.5 * (1.0 + np.tanh(0.5 * z))


def logistic_fit(f: np.ndarray, y: np.ndarray, penalty: float, *, iterations: int = 50) -> tuple[np.ndarray, float]:
    """(weights (p,), intercept) maximising the log-likelihood minus ``penalty * n / 2 * |w|^2`` (damped Newton)."""
    n, p = f.shape
    a = np.concatenate([np.ones((n, 1)), f], axis=1)
    reg = np.full(p + 1, penalty * n)
    reg[0] = 1e-9 * n
    theta = np.zeros(p + 1)
    theta[0] = np.log((y.sum() + 0.5) / (n - y.sum() + 0.5))
    for _ in range(iterations):
        mu = _sigmoid(a @ theta)
        grad = a.T @ (mu - y) + reg * theta
        hess = (a * (mu * (1 - mu))[:, None]).T @ a + np.diag(reg)
        step = np.linalg.solve(hess, grad)
        theta -= step
        if np.max(np.abs(step)) < 1e-9:
            break
    return theta[1:], float(theta[0])


def _log_loss(p: np.ndarray, y: np.ndarray) -> float:
    p = np.clip(p, 1e-12, 1 - 1e-12)
    return float(-np.mean(y * np.log(p) + (1 - y) * np.log(1 - p)))


@dataclass(frozen=True, eq=False)
class Classifier:
    """A fitted P(success | start state): ``predict(states) -> (n,)``; ``describe()`` for reports."""

    model: str  # one of MODELS
    features: FeatureMap
    detail: dict[str, Any] = field(default_factory=dict)
    _predict: Callable[[np.ndarray], np.ndarray] | None = None

    def predict(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.clip(self._predict(self.features.standardise(states)), 0.0, 1.0)

    def describe(self) -> dict[str, Any]:
        return {"model": self.model, "inputs": list(self.features.input_names), "expansion": self.features.expansion, **self.detail}


def _feature_map(states: Mapping[str, np.ndarray], quantities: Sequence[str], seed: int) -> FeatureMap:
    """Standardised inputs over the varying components of ``quantities`` (constant ones keep scale 1);
    ``poly2`` up to 12 varying inputs, else random Fourier features with the median-distance length
    scale, as the option models choose (``trainers/fitting_kernels.fit_feature_map``)."""
    shapes = tuple(tuple(np.asarray(states[q]).shape[1:]) for q in quantities)
    raw = flatten_states(states, tuple(quantities), shapes, where="start states")
    scale = raw.std(axis=0)
    moving = np.array([varying(raw[:, i]) for i in range(raw.shape[1])])
    scale = np.where(moving & (scale > 0), scale, 1.0)
    center = raw.mean(axis=0)
    if int(moving.sum()) <= _POLY2_MAX:
        return FeatureMap(tuple(quantities), shapes, center, scale, "poly2")
    rng = np.random.default_rng([seed, 22])
    z = ((raw - center) / scale)[:, moving]
    sub = z[rng.choice(z.shape[0], size=min(z.shape[0], 400), replace=False)]
    dist = np.sqrt(np.sum((sub[:, None, :] - sub[None, :, :]) ** 2, axis=-1))
    ell = float(np.median(dist[np.triu_indices(sub.shape[0], 1)])) if sub.shape[0] > 1 else 1.0
    w = np.zeros((raw.shape[1], _RFF))
    w[moving] = rng.normal(0.0, 1.0 / max(ell, 1e-9), size=(int(moving.sum()), _RFF))
    return FeatureMap(tuple(quantities), shapes, center, scale, "rff", w, rng.uniform(0.0, 2.0 * np.pi, size=_RFF))


def _fit_logistic(fmap: FeatureMap, z_fit, y_fit, z_choose, y_choose) -> Classifier:
    keep = np.flatnonzero(np.ptp(z_fit, axis=0) > 0) if z_fit.size else np.arange(0)
    best = None
    for penalty in PENALTIES:
        w, b = logistic_fit(_design(fmap, z_fit, keep), y_fit, penalty)
        loss = _log_loss(_sigmoid(_design(fmap, z_choose, keep) @ w + b), y_choose)
        if best is None or loss < best[0] - 1e-12:
            best = (loss, penalty, w, b)
    _, penalty, w, b = best
    return Classifier("logistic", fmap, {"penalty": penalty}, lambda z: _sigmoid(_design(fmap, z, keep) @ w + b))


def _design(fmap: FeatureMap, z: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Expanded features of the varying inputs only (constant inputs add nothing but collinearity)."""
    sub = z[:, keep]
    if fmap.expansion == "rff":
        return np.concatenate([sub, fmap.expand(z)[:, z.shape[1]:]], axis=1)
    if fmap.expansion == "linear":
        return sub
    i, j = np.triu_indices(sub.shape[1])
    return np.concatenate([sub, sub[:, i] * sub[:, j]], axis=1)


def _fit_trees(fmap: FeatureMap, z_fit, y_fit, seed: int) -> Classifier | str:
    """Boosted trees on the standardised inputs, or why they were not fitted."""
    try:
        from sklearn.ensemble import HistGradientBoostingClassifier
    except ImportError:
        return "scikit-learn is not installed (pip install 'kinetome[learn]')"
    if len(np.unique(y_fit)) < 2:
        return "every episode of the fit split had the same outcome"
    from threadpoolctl import threadpool_limits  # installed with scikit-learn

    trees = HistGradientBoostingClassifier(max_iter=_TREES, learning_rate=0.1, max_leaf_nodes=15, early_stopping=False, random_state=seed)
    with threadpool_limits(limits=1):  # one thread: OpenMP threads fighting the simulator's are many times slower
        trees.fit(z_fit, y_fit)

    def predict(z: np.ndarray) -> np.ndarray:
        with threadpool_limits(limits=1):
            return trees.predict_proba(z)[:, 1]

    return Classifier("boosted-trees", fmap, {"library": "scikit-learn HistGradientBoostingClassifier", "iterations": _TREES}, predict)


def fit_classifier(
    states: Mapping[str, np.ndarray],
    success: np.ndarray,
    fit_rows: np.ndarray,
    choose_rows: np.ndarray,
    *,
    quantities: Sequence[str],
    models: Sequence[str] = MODELS,
    seed: int = 0,
) -> tuple[Classifier, dict[str, Any]]:
    """Fit each of ``models`` on ``fit_rows``; keep logistic regression unless trees have a lower Brier
    score on ``choose_rows``. Returns the classifier and what was compared."""
    unknown = [m for m in models if m not in MODELS]
    if unknown or not models:
        raise ValueError(f"models must be some of {MODELS}, got {list(models)}")
    y = np.asarray(success, dtype=np.float64)
    fit_states = {q: np.asarray(states[q])[fit_rows] for q in quantities}
    fmap = _feature_map(fit_states, quantities, seed)
    z = fmap.standardise({q: states[q] for q in quantities})
    tried: dict[str, Any] = {}
    chosen = None
    for model in models:
        if model == "logistic":
            c = _fit_logistic(fmap, z[fit_rows], y[fit_rows], z[choose_rows], y[choose_rows])
        else:
            c = _fit_trees(fmap, z[fit_rows], y[fit_rows], seed)
            if isinstance(c, str):
                tried[model] = {"skipped": c}
                continue
        score = brier(c._predict(z[choose_rows]), y[choose_rows])
        tried[model] = {"brier_choose": score}
        if chosen is None or score < chosen[0] - 1e-12:
            chosen = (score, c)
    return chosen[1], tried
