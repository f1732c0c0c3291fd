"""The few numbers of an option-model summary a person reads first (show, fit, report)."""

from __future__ import annotations

from typing import Any

__all__ = ["headlines"]


def _fit_text(report: dict[str, Any] | None) -> str:
    if not report:
        return "-"
    r2 = report.get("r2")
    if r2 is not None:
        return f"R^2 {r2:.3f} (rmse {report.get('rmse', float('nan')):.3g}, n {report.get('n')})"
    return f"rmse {report.get('rmse', float('nan')):.3g} (constant target, n {report.get('n')})"


def headlines(summary: dict[str, Any]) -> list[dict[str, str]]:
    """Rows ``{"check": ..., "value": ...}`` from ``OptionModels.summary()``."""
    rows: list[dict[str, str]] = []
    outcomes = summary.get("outcomes") or {}
    if outcomes:
        rows.append({"check": "outcomes", "value": ", ".join(f"{k} {v:.2f}" if isinstance(v, float) else f"{k} {v}" for k, v in outcomes.items())})
    duration = summary.get("duration") or {}
    rows.append({"check": "duration: mean steps", "value": _fit_text(duration.get("duration", duration.get("steps")))})
    rows.append({"check": "duration: E[gamma^k]", "value": _fit_text(duration.get("discount"))})
    timeout = duration.get("timeout") or {}
    if timeout:
        rows.append({"check": "timeout probability", "value": f"Brier {timeout.get('brier', float('nan')):.3g} (held-out rate {timeout.get('rate_held_out', float('nan')):.2f})"})
    reward = summary.get("reward") or {}
    rows.append({"check": "reward: discounted return", "value": _fit_text(reward.get("discounted_return"))})
    for key, label in (("end_state", "end state (stopped)"), ("end_state_timed_out", "end state (timed out)")):
        es = summary.get(key)
        if es:
            cov = es.get("coverage_90") or {}
            rows.append({"check": f"{label}: 90% interval coverage", "value": f"mean {cov.get('mean', float('nan')):.3f}, min {cov.get('min', float('nan')):.2f} over {cov.get('components_in_mean', len(cov.get('per_component', {})))} non-constant components (n {es.get('n_held_out')})"})
    return rows
