"""The audit log: who did what to the store and when, each entry chained to the one before.

Every registration, other add, promotion, roll-back, import, copy and settings change appends one entry in the
same transaction as the change. An entry's digest covers its fields and the digest of the entry
before it, and ``store_info.audit_head`` names the newest entry, so ``verify`` finds an edited,
removed or reordered entry (rewriting the whole tail consistently needs write access to the index
and is not detected: keep a copy of the head elsewhere if that matters).
"""

from __future__ import annotations

import getpass
import hashlib
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from kinetome.library.store.index import set_store_info, store_info
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.metadata import canonical_json
from kinetome.library.store.schema import EMPTY_DIGEST

__all__ = [
    "ACTOR_ENV_VAR",
    "AUDIT_ACTIONS",
    "AuditEntry",
    "current_actor",
    "entry_digest",
    "append_entry",
    "insert_entries",
    "load_entries",
    "audit_problems",
]

ACTOR_ENV_VAR = "KINETOME_USER"
# version reasons (an add), then changes of current versions, then whole-bundle and whole-store moves,
# then changes of store settings (``settings.py``)
AUDIT_ACTIONS = (
    "registered", "revised", "retrained", "initiation-learned", "promoted", "rolled-back", "imported", "copied",
    "settings-changed",
)
_HEAD_KEY = "audit_head"
_COLUMNS = "seq, actor, created_at, action, name, subject, detail, previous, digest"


@dataclass(frozen=True)
class AuditEntry:
    """One line of the audit log: ``actor`` did ``action`` to ``subject`` at ``created_at``."""

    seq: int
    actor: str
    created_at: str
    action: str
    name: str | None  # the skill it concerns (None: the whole store)
    subject: str  # e.g. ``reach@3``, ``reach@2 for nominal``
    detail_json: str
    previous: str
    digest: str

    @property
    def detail(self) -> dict[str, Any]:
        return json.loads(self.detail_json)

    def to_dict(self) -> dict[str, Any]:
        return {
            "seq": self.seq, "actor": self.actor, "created_at": self.created_at, "action": self.action,
            "name": self.name, "subject": self.subject, "detail": self.detail, "previous": self.previous,
            "digest": self.digest,
        }


def current_actor() -> str:
    """``$KINETOME_USER`` if set, else the OS user name."""
    configured = os.environ.get(ACTOR_ENV_VAR, "").strip()
    if configured:
        return configured
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no name for this uid (e.g. in a bare container)
        return f"uid-{os.getuid()}" if hasattr(os, "getuid") else "unknown"


def entry_digest(seq: int, actor: str, created_at: str, action: str, name: str | None, subject: str, detail_json: str, previous: str) -> str:
    """sha256 over an entry's fields and the digest of the entry before it."""
    fields = [seq, actor, created_at, action, name, subject, json.loads(detail_json), previous]
    return hashlib.sha256(canonical_json(fields).encode()).hexdigest()


def _head(conn: IndexBackend) -> tuple[int, str]:
    row = conn.execute("SELECT seq, digest FROM audit_log ORDER BY seq DESC LIMIT 1").fetchone()
    return (0, EMPTY_DIGEST) if row is None else (int(row[0]), str(row[1]))


def append_entry(
    conn: IndexBackend, action: str, *, name: str | None, subject: str, detail: Mapping[str, Any], created_at: str,
    actor: str | None = None,
) -> AuditEntry:
    """Append one entry; call inside the write transaction of the change it records."""
    if action not in AUDIT_ACTIONS:
        raise ValueError(f"audit action must be one of {', '.join(AUDIT_ACTIONS)}, got {action!r}")
    seq, previous = _head(conn)
    entry = _make(seq + 1, actor or current_actor(), created_at, action, name, subject, canonical_json(dict(detail)), previous)
    insert_entries(conn, [entry])
    return entry


def _make(seq: int, actor: str, created_at: str, action: str, name: str | None, subject: str, detail_json: str, previous: str) -> AuditEntry:
    digest = entry_digest(seq, actor, created_at, action, name, subject, detail_json, previous)
    return AuditEntry(seq, actor, created_at, action, name, subject, detail_json, previous, digest)


def insert_entries(conn: IndexBackend, entries: list[AuditEntry]) -> None:
    """Insert entries as they are (also used to copy a log whole) and move the head to the last one."""
    if not entries:
        return
    conn.executemany(
        f"INSERT INTO audit_log ({_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [(e.seq, e.actor, e.created_at, e.action, e.name, e.subject, e.detail_json, e.previous, e.digest) for e in entries],
    )
    last = entries[-1]
    set_store_info(conn, _HEAD_KEY, f"{last.seq}:{last.digest}")


def load_entries(conn: IndexBackend, name: str | None = None) -> list[AuditEntry]:
    """Every entry, oldest first (only those about skill ``name`` if given)."""
    if name is None:
        rows = conn.execute(f"SELECT {_COLUMNS} FROM audit_log ORDER BY seq").fetchall()
    else:
        rows = conn.execute(f"SELECT {_COLUMNS} FROM audit_log WHERE name = ? ORDER BY seq", (name,)).fetchall()
    return [AuditEntry(int(r[0]), *r[1:]) for r in rows]


def audit_problems(conn: IndexBackend) -> list[str]:
    """Edited, removed or reordered entries: recompute each digest and follow the chain to the head."""
    problems = []
    expected_seq, previous = 1, EMPTY_DIGEST
    fix = "the audit log was changed outside kinetome: restore the index from a backup"
    for e in load_entries(conn):
        if e.seq != expected_seq:
            problems.append(f"audit entry {expected_seq} is missing (the next is {e.seq}); {fix}")
        if e.previous != previous:
            problems.append(f"audit entry {e.seq} does not follow the entry before it (an entry was removed or reordered); {fix}")
        if entry_digest(e.seq, e.actor, e.created_at, e.action, e.name, e.subject, e.detail_json, e.previous) != e.digest:
            problems.append(f"audit entry {e.seq} ({e.action} {e.subject}) no longer matches its digest {e.digest[:12]}; {fix}")
        expected_seq, previous = e.seq + 1, e.digest
    recorded = store_info(conn, _HEAD_KEY)
    head = f"{expected_seq - 1}:{previous}" if expected_seq > 1 else None
    if recorded != head:
        problems.append(
            f"the audit log ends at entry {expected_seq - 1} but the store recorded its last entry as "
            f"{(recorded or 'none').split(':')[0]} (entries were removed at the end); {fix}"
        )
    return problems
