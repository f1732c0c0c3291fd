"""Current versions per task: what unpinned references resolve to, promotion and roll-back."""

from __future__ import annotations

import json
from collections.abc import Mapping

from kinetome.library.errors import InvalidInputError
from kinetome.library.store import audit, index
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.names import NOMINAL_TASK, parse_pin, parse_ref, validate_task
from kinetome.library.store.records import CurrentEntry

__all__ = ["CurrentMethods", "CURRENT_REASONS"]

# why a version became current: set by registering, by the retrain promotion rule, by hand, by import
CURRENT_REASONS = ("registered", "revised", "non-inferior", "promoted", "imported", "migrated")


class CurrentMethods:
    """Mixed into ``Store``: needs ``_index``, ``_row`` and ``_row_id``."""

    def currents(self, name: str) -> dict[str, CurrentEntry]:
        """task -> the current entry, for every task that has one."""
        bare, _ = parse_ref(name)
        return {e.task: e for e in index.load_currents(self._index, bare)}

    def current_history(self, name: str) -> list[CurrentEntry]:
        """Every change of a current version of ``name``, oldest first (promotions and roll-backs included)."""
        bare, _ = parse_ref(name)
        return index.load_current_history(self._index, bare)

    def current_tasks(self, ref: str) -> list[str]:
        """The tasks for which the version ``ref`` is current now."""
        return index.current_tasks(self._index, self._row_id(ref))

    def promote(
        self,
        ref: str,
        *,
        task: str = NOMINAL_TASK,
        reason: str = "promoted",
        evidence: Mapping | None = None,
    ) -> CurrentEntry:
        """Make the pinned version ``ref`` current for ``task``; rolling back is promoting an older version.
        Both are serialised with every other write to the store and recorded in the audit log."""
        validate_task(task)
        if reason not in CURRENT_REASONS:
            raise InvalidInputError(f"reason must be one of {', '.join(CURRENT_REASONS)}, got {reason!r}")
        if not parse_pin(ref).pinned:
            raise InvalidInputError(f"promote needs a pinned version NAME@N, got {ref!r}; e.g. '{ref}@1'")
        evidence_json = canonical_meta(evidence, what="evidence")
        with self._index.write_transaction() as conn:
            row_id, record = self._row(ref)
            before = index.current_row(conn, record.name, task)
            previous = None if before is None else self._load_id(before)
            now = index.utc_now()
            index.insert_current(
                conn, name=record.name, task=task, version_row=row_id, reason=reason, evidence_json=evidence_json,
                created_at=now,
            )
            back = previous is not None and previous.number > record.number
            audit.append_entry(
                conn, "rolled-back" if back else "promoted", name=record.name, subject=f"{record.ref} for {task}",
                created_at=now,
                detail={"task": task, "from": None if previous is None else previous.ref, "reason": reason,
                        "evidence": json.loads(evidence_json)},
            )
        return self.currents(record.name)[task]
