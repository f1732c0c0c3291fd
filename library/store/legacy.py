"""Reading what the first wave stored (index schema 1, bundle format 1): the ``imported`` reason
becomes the original reason plus an origin, and option-model revisions become artifacts."""

from __future__ import annotations

from typing import Any

__all__ = ["LEGACY_IMPORTED", "reason_and_origin", "model_task_and_settings"]

LEGACY_IMPORTED = "imported"


def reason_and_origin(reason: str, meta: dict[str, Any]) -> tuple[str, dict[str, Any] | None]:
    """(reason, origin) of a schema-1 version: an ``imported`` one takes the reason recorded in
    ``meta["imported_from"]`` (following earlier imports back) and keeps the first original ref."""
    if reason != LEGACY_IMPORTED:
        return reason, None
    source = meta.get("imported_from")
    origin: dict[str, Any] | None = None
    while isinstance(source, dict):
        origin = {"store": None, "ref": source.get("ref"), "created_at": source.get("created_at")}
        reason = source.get("reason") if isinstance(source.get("reason"), str) else "registered"
        source = source.get("previous")
    if reason == LEGACY_IMPORTED or reason not in ("registered", "retrained"):
        reason = "registered"
    return reason, origin or {"store": None, "ref": None, "created_at": None}


def model_task_and_settings(meta: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    """Task and settings of a schema-1 option-model revision, from what its meta recorded."""
    task = {k: meta[k] for k in ("env", "variant") if meta.get(k) is not None}
    settings = {k: meta[k] for k in ("episodes", "seed") if meta.get(k) is not None}
    return task, settings
