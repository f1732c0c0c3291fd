"""Numeric kernels for option-model fitting: feature maps, ridge with leave-one-out penalty, softmax regression."""

from __future__ import annotations

from typing import Mapping

import numpy as np

from kinetome.library.option_models import FeatureMap, LinearHead, SoftmaxHead, flatten_states

__all__ = ["fit_feature_map", "ridge_loo", "fit_linear_head", "fit_softmax", "AUTO_POLY2_MAX_INPUTS"]

# "auto" expansion: poly2 up to this many inputs (poly2 of 12 inputs = 90 columns), rff beyond.
AUTO_POLY2_MAX_INPUTS = 12
RFF_COMPONENTS = 256
# Relative ridge grid: lambda = s_max^2 * RIDGE_GRID, s_max the largest singular value of
# the centred design matrix, so the choice does not depend on the scale of the features.
RIDGE_GRID = np.logspace(-10, 0, 21)
# L2 penalty of the softmax regression on standardised features, in units of the summed
# log-likelihood: common practice (the default strength of most logistic-regression libraries).
SOFTMAX_L2 = 1.0


def fit_feature_map(
    values: Mapping[str, np.ndarray],
    quantities: tuple[str, ...],
    *,
    expansion: str = "auto",
    rng: np.random.Generator,
    rff_components: int = RFF_COMPONENTS,
) -> FeatureMap:
    """Standardise ``quantities`` on these rows and pick the expansion.

    Constant columns get scale 1 (they are centred to 0 on the training rows).
    For ``rff`` the length scale is the median pairwise distance of the
    standardised rows (the median heuristic, common practice).
    """
    shapes = tuple(tuple(np.asarray(values[q]).shape[1:]) if q in values else () for q in quantities)
    raw = flatten_states(values, quantities, shapes, where="start states")
    center = raw.mean(axis=0)
    scale = raw.std(axis=0)
    scale = np.where(scale > 1e-12 * np.maximum(1.0, np.abs(center)), scale, 1.0)
    d = raw.shape[1]
    if expansion == "auto":
        expansion = "poly2" if d <= AUTO_POLY2_MAX_INPUTS else "rff"
    if expansion != "rff":
        return FeatureMap(quantities, shapes, center, scale, expansion)
    z = (raw - center) / scale
    sub = z[rng.choice(z.shape[0], size=min(z.shape[0], 400), replace=False)]
    dist = np.sqrt(np.sum((sub[:, None, :] - sub[None, :, :]) ** 2, axis=-1))
    ell = float(np.median(dist[np.triu_indices(sub.shape[0], 1)])) if sub.shape[0] > 1 else 1.0
    ell = ell if ell > 1e-9 else 1.0
    w = rng.normal(0.0, 1.0 / ell, size=(d, rff_components))
    b = rng.uniform(0.0, 2.0 * np.pi, size=rff_components)
    return FeatureMap(quantities, shapes, center, scale, "rff", w, b)


def ridge_loo(x: np.ndarray, y: np.ndarray, *, grid: np.ndarray = RIDGE_GRID) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Ridge regression of y (n, m) on x (n, p) with an unpenalised intercept.

    The penalty is chosen per output from ``grid`` by the exact leave-one-out
    error, computed without refitting: for a linear smoother the LOO residual
    is e_i / (1 - H_ii) (Hastie, Tibshirani & Friedman, The Elements of
    Statistical Learning, 2nd ed., Sec. 7.10; section from memory), with H
    from the thin SVD of the centred design plus 1/n for the intercept.
    Returns (weights (p, m), bias (m,), lambda (m,), loo_mse (m,)).
    """
    n = x.shape[0]
    x_mean, y_mean = x.mean(axis=0), y.mean(axis=0)
    xc, yc = x - x_mean, y - y_mean
    u, s, vt = _thin_svd(xc)
    m = y.shape[1]
    if s.size == 0:  # every feature constant: the intercept alone
        return np.zeros((x.shape[1], m)), y_mean, np.zeros(m), np.mean(yc**2, axis=0) * (n / max(n - 1, 1)) ** 2
    uty = u.T @ yc
    u2 = u**2
    lambdas = s[0] ** 2 * grid
    best_mse = np.full(m, np.inf)
    best_lam = np.zeros(m)
    for lam in lambdas:
        f = s**2 / (s**2 + lam)
        resid = yc - u @ (f[:, None] * uty)
        h = u2 @ f + 1.0 / n
        loo = resid / np.maximum(1.0 - h, 1e-12)[:, None]
        mse = np.mean(loo**2, axis=0)
        better = mse < best_mse
        best_mse[better] = mse[better]
        best_lam[better] = lam
    coef = (s[:, None] / (s[:, None] ** 2 + best_lam[None, :])) * uty  # (r, m)
    w = vt.T @ coef
    return w, y_mean - x_mean @ w, best_lam, best_mse


def _thin_svd(xc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(u (n, r), s (r,), vt (r, p)) of the numerically non-null part of xc.

    For tall matrices via the eigen-decomposition of the p x p Gram matrix
    (several times faster than LAPACK's SVD, and far less sensitive to BLAS
    threads fighting over shared cores); directions with s^2 below 1e-12 s_max^2
    are dropped, below the smallest ridge penalty of the grid (1e-10 s_max^2).
    """
    n, p = xc.shape
    if n >= p:
        evals, evecs = np.linalg.eigh(xc.T @ xc)
        order = np.argsort(evals)[::-1]
        evals, evecs = evals[order], evecs[:, order]
        keep = evals > (evals[0] * 1e-12 if evals.size and evals[0] > 0 else np.inf)
        s = np.sqrt(evals[keep])
        v = evecs[:, keep]
        return (xc @ v) / s, s, v.T
    u, s, vt = np.linalg.svd(xc, full_matrices=False)
    keep = s > (s[0] * 1e-6 if s.size and s[0] > 0 else np.inf)
    return u[:, keep], s[keep], vt[keep]


def fit_linear_head(x: np.ndarray, y: np.ndarray, outputs: tuple[str, ...], *, low: np.ndarray | None = None, high: np.ndarray | None = None) -> LinearHead:
    """Ridge head clipped to [low, high] (default: the training target range)."""
    w, b, _, _ = ridge_loo(x, y)
    lo = y.min(axis=0) if low is None else low
    hi = y.max(axis=0) if high is None else high
    return LinearHead(outputs, w, b, lo, hi)


def fit_softmax(x: np.ndarray, labels: np.ndarray, *, l2: float = SOFTMAX_L2, max_iter: int = 100, tol: float = 1e-10) -> SoftmaxHead:
    """Multinomial logistic regression by damped Newton steps; L2 on weights, not on biases.

    Only classes present in ``labels`` are modelled (the first is the reference
    with zero logits). Separable data stay finite thanks to the penalty.
    """
    classes = tuple(int(c) for c in np.unique(labels))
    n, p = x.shape
    k = len(classes)
    if k == 1:
        return SoftmaxHead(classes, np.zeros((p, 1)), np.zeros(1))
    y = (labels[:, None] == np.asarray(classes)[None, 1:]).astype(np.float64)  # (n, k-1)
    xa = np.concatenate([x, np.ones((n, 1))], axis=1)  # (n, p+1)
    q = p + 1
    theta = np.zeros((q, k - 1))
    pen = np.full(q, l2)
    pen[-1] = 0.0

    def probs(th: np.ndarray) -> np.ndarray:
        logits = np.concatenate([np.zeros((n, 1)), xa @ th], axis=1)
        logits -= logits.max(axis=1, keepdims=True)
        e = np.exp(logits)
        return e / e.sum(axis=1, keepdims=True)

    def objective(th: np.ndarray, pr: np.ndarray) -> float:
        full_y = np.concatenate([1.0 - y.sum(axis=1, keepdims=True), y], axis=1)
        return float(-np.sum(full_y * np.log(np.clip(pr, 1e-300, None))) + 0.5 * np.sum(pen[:, None] * th**2))

    pr = probs(theta)
    obj = objective(theta, pr)
    for _ in range(max_iter):
        pf = pr[:, 1:]
        grad = xa.T @ (pf - y) + pen[:, None] * theta  # (q, k-1)
        hess = np.zeros((q * (k - 1), q * (k - 1)))
        for a in range(k - 1):
            for b in range(a, k - 1):
                wgt = pf[:, a] * ((a == b) - pf[:, b])
                block = (xa * wgt[:, None]).T @ xa
                hess[a * q : (a + 1) * q, b * q : (b + 1) * q] = block
                hess[b * q : (b + 1) * q, a * q : (a + 1) * q] = block.T
        hess += np.diag(np.tile(pen, k - 1) + 1e-9)
        g = grad.T.ravel()  # class-major, matching the Hessian blocks
        step = np.linalg.solve(hess, g).reshape(k - 1, q).T
        t = 1.0
        while True:
            cand = theta - t * step
            pr_c = probs(cand)
            obj_c = objective(cand, pr_c)
            if obj_c <= obj + 1e-12 * abs(obj) or t < 1e-8:
                break
            t *= 0.5
        improvement = obj - obj_c
        theta, pr, obj = cand, pr_c, obj_c
        if improvement <= tol * max(1.0, abs(obj)):
            break
    weights = np.concatenate([np.zeros((p, 1)), theta[:-1]], axis=1)
    bias = np.concatenate([[0.0], theta[-1]])
    return SoftmaxHead(classes, weights, bias)
