"""Light summaries of lineage for ``show`` and ``lineage``: the task a version was made for, its
result there, and why a version is current (standard library only)."""

from __future__ import annotations

import json
from typing import Any

from kinetome.library.lineage.roles import EVALUATION_FILE, RECORD_FILE
from kinetome.library.store.names import NOMINAL_TASK
from kinetome.library.stored_meta import current_meta, success_text

__all__ = ["promotion_rows", "counts_text", "read_json_file", "made_for", "method_of", "result_on_task", "why_current", "lineage_view"]


def counts_text(counts: dict[str, Any] | None) -> str | None:
    """``k/n = rate`` for {"successes", "episodes"}."""
    if not counts or not counts.get("episodes"):
        return None
    k, n = counts["successes"], counts["episodes"]
    return f"{k}/{n} = {k / n:.3f}"


def read_json_file(store: Any, version: Any, role: str) -> dict[str, Any] | None:
    if role not in version.roles:
        return None
    value = json.loads(store.read_file(version, role).decode("utf-8"))
    return value if isinstance(value, dict) else None


def made_for(store: Any, version: Any) -> str | None:
    """The task (variant name) a version was made for: nominal for registered specs."""
    record = read_json_file(store, version, RECORD_FILE)
    if record is not None:
        return (record.get("variant") or {}).get("name") or NOMINAL_TASK
    if version.reason in ("registered", "revised"):
        return NOMINAL_TASK
    variant = current_meta(version.meta).get("variant")  # versions stored before retrains kept a record
    if isinstance(variant, dict):
        file = variant.get("file")
        return variant.get("name") or (file.replace("\\", "/").rsplit("/", 1)[-1].rsplit(".", 1)[0] if isinstance(file, str) else None)
    return None


def method_of(store: Any, version: Any) -> str | None:
    """How a retrained version was made (``retrain`` or ``train``); None for registered specs."""
    record = read_json_file(store, version, RECORD_FILE)
    if record is not None:
        return record.get("method")
    return current_meta(version.meta).get("method") if version.reason == "retrained" else None


def result_on_task(store: Any, version: Any) -> str | None:
    """The version's success on the task it was trained for, on the promotion test's fresh episodes."""
    evaluation = read_json_file(store, version, EVALUATION_FILE)
    if evaluation is not None:
        for row in (evaluation.get("promotion") or {}).get("tasks", []):
            if "trained" in row.get("roles", []):
                return counts_text(row.get("child"))
    return success_text(current_meta(version.meta).get("metrics_after"))


def promotion_rows(promotion: dict[str, Any]) -> list[dict[str, Any]]:
    """One table row per task of a promotion test: counts, bound and verdict."""
    rows = []
    for row in promotion["tasks"]:
        if row["non_inferior"]:
            verdict = "non-inferior" + (": current" if row["task"] in promotion["current_for"] else " (report only)")
        else:
            verdict = "not shown non-inferior" + (": regression" if row["difference"] < 0 else "")
        rows.append(
            {
                "task": row["task"],
                "roles": ", ".join(row["roles"]),
                "parent": counts_text(row["parent"]),
                "child": counts_text(row["child"]),
                "compared": _compared_text(row, promotion["parent"]),
                "bound": f"{row['lower_bound']:+.3f}",
                "verdict": verdict,
            }
        )
    return rows


def _compared_text(row: dict[str, Any], parent_ref: str) -> str:
    """Which version the child was tested against on a task (the parent, or the version current there)."""
    compared_with = row.get("compared_with", parent_ref)
    return "the parent" if compared_with == parent_ref else f"{compared_with} (current) {counts_text(row.get('compared'))}"


def why_current(entry: Any) -> str:
    """One line: why ``entry.version`` is current for ``entry.task``."""
    ev = entry.evidence
    if entry.reason == "non-inferior":
        return (
            f"retrain non-inferior to {ev.get('compared_with', ev.get('parent_ref', 'its parent'))} on {entry.task}: "
            f"{counts_text(ev.get('child'))} vs {counts_text(ev.get('compared', ev.get('parent')))}, lower bound "
            f"{ev.get('lower_bound', float('nan')):+.3f} > -{ev.get('margin')}"
        )
    if entry.reason == "promoted":
        return "promoted by hand" + (f": {ev['note']}" if ev.get("note") else "")
    if entry.reason == "imported":
        return f"imported, current for {entry.task} in the store it came from ({ev.get('ref')})"
    if entry.reason == "migrated":
        return "the newest version when the store was migrated (unpinned references resolved to it before)"
    return entry.reason  # registered / revised


def lineage_view(store: Any, name: str) -> dict[str, Any]:
    """Every version with its lineage and task, what is current for which task and why, and every change."""
    currents = store.currents(name)
    by_version: dict[str, list[str]] = {}
    for task, entry in sorted(currents.items()):
        by_version.setdefault(entry.version, []).append(task)
    versions = []
    for v in store.history(name):
        versions.append(
            {
                "ref": v.ref,
                "identity": v.identity,
                "reason": v.reason,
                "method": method_of(store, v),
                "parent": v.parent,
                "created_at": v.created_at,
                "task": made_for(store, v),
                "success_on_task": result_on_task(store, v),
                "current_for": by_version.get(v.ref, []),
                "origin": v.origin,
            }
        )
    current = [
        {"task": e.task, "version": e.version, "reason": e.reason, "why": why_current(e), "created_at": e.created_at}
        for e in currents.values()
    ]
    changes = [
        {"task": e.task, "version": e.version, "reason": e.reason, "created_at": e.created_at}
        for e in store.current_history(name)
    ]
    return {"name": name, "versions": versions, "current": current, "changes": changes}
