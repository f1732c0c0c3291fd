"""Lineage metadata under current names: written by retrain and train, read back by show and lineage.

Versions stored by older code keep their metadata as written; ``current_meta``
returns it under today's names (silently: stored versions cannot be edited),
so ``--json`` outputs use one vocabulary whatever the version's age.
Standard library only (``show`` and ``lineage`` stay light).
"""

from __future__ import annotations

from typing import Any, Mapping

from .renamed_keys import META_RENAMES, OUTCOME_RENAMES, TRAIN_RENAMES, rename_keys

__all__ = ["current_meta", "metrics_view", "variant_record", "success_text"]

_METRICS = ("before", "after", "metrics_before", "metrics_after")
_CONFIG_RENAMES = {k: v for k, v in TRAIN_RENAMES.items() if "." not in k}


def variant_record(file: Any, variant: Any = None) -> dict[str, Any] | None:
    """A task variant as lineage records it: ``{file, name, digest}`` (None without a variant)."""
    if file is None and variant is None:
        return None
    return {"file": None if file is None else str(file), "name": getattr(variant, "name", None), "digest": getattr(variant, "digest", None)}


def metrics_view(metrics: Mapping[str, Any]) -> dict[str, Any]:
    """Before/after metrics with ``successes`` counted and outcome labels current."""
    out = dict(metrics)
    if "successes" not in out and isinstance(out.get("success_rate"), (int, float)) and isinstance(out.get("episodes"), int):
        out["successes"] = round(out["success_rate"] * out["episodes"])
    if isinstance(out.get("outcomes"), dict):
        out["outcomes"] = {OUTCOME_RENAMES.get(k, k): v for k, v in out["outcomes"].items()}
    return out


def current_meta(meta: Mapping[str, Any]) -> dict[str, Any]:
    """``meta`` of a version under today's names (older spellings read silently)."""
    out, _ = rename_keys(dict(meta), META_RENAMES, source="lineage metadata", warn=False)
    for key in _METRICS:
        if isinstance(out.get(key), dict):
            out[key] = metrics_view(out[key])
    if isinstance(out.get("config"), dict):
        out["config"], _ = rename_keys(out["config"], _CONFIG_RENAMES, source="lineage metadata", warn=False)
    if isinstance(out.get("variant"), str):
        out["variant"] = variant_record(out["variant"])  # `train` stored a bare path
    if "method" not in out and "config" in out:
        out["method"] = "train" if "trained_with" in out else "retrain"
    return out


def success_text(metrics: Mapping[str, Any] | None) -> str | None:
    """``k/n = rate`` for before/after metrics, or None when there are none."""
    if not metrics or not isinstance(metrics.get("episodes"), int):
        return None
    m = metrics_view(metrics)
    return f"{m['successes']}/{m['episodes']} = {m['episodes'] and m['successes'] / m['episodes']:.3f}"
