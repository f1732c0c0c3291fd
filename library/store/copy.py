"""``copy_store``: move a whole store to another backend (embedded <-> PostgreSQL, folder <-> S3 blobs).

Every blob is re-hashed on the way out and written to the target first; then every row (versions,
files, notes, current-version events, artifacts, the audit log) goes into the empty target in one
transaction, in the source's order, so numbers, identities, timestamps and histories stay as they
were. The copy keeps the store id and appends a ``copied`` audit entry; then both stores are
verified and every identity and artifact digest is compared.
"""

from __future__ import annotations

from dataclasses import dataclass

from kinetome.library.errors import InvalidInputError, StoreIntegrityError
from kinetome.library.store import audit, index
from kinetome.library.store.settings import SETTING_NAMES
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.store import Store
from kinetome.library.store.verify import VerifyReport

__all__ = ["copy_store", "CopyReport"]

# table -> (columns without the row id, {column: the table its value is a row id of})
_ROWS: dict[str, tuple[tuple[str, ...], dict[str, str]]] = {
    "versions": (
        ("name", "number", "parent_id", "parent_identity", "reason", "identity", "origin", "meta", "content_key", "created_at"),
        {"parent_id": "versions"},
    ),
    "notes": (("version_id", "text", "created_at"), {"version_id": "versions"}),
    "currents": (("name", "task", "version_id", "reason", "evidence", "created_at"), {"version_id": "versions"}),
    "artifacts": (
        ("version_id", "kind", "revision", "computed_on", "task", "settings", "software", "meta", "lookup_key", "digest",
         "content_key", "origin", "created_at"),
        {"version_id": "versions"},
    ),
}
_FILES = {"version_files": ("version_id", "versions"), "artifact_files": ("artifact_id", "artifacts")}


@dataclass(frozen=True)
class CopyReport:
    """What ``copy_store`` moved, and both stores' verify reports after the copy."""

    source: str
    target: str
    versions: int
    artifacts: int
    blobs: int
    bytes: int
    audit_entries: int
    source_report: VerifyReport
    target_report: VerifyReport

    @property
    def ok(self) -> bool:
        return self.source_report.ok and self.target_report.ok

    def to_dict(self) -> dict:
        return {
            "ok": self.ok, "source": self.source, "target": self.target, "versions": self.versions,
            "artifacts": self.artifacts, "blobs": self.blobs, "bytes": self.bytes, "audit_entries": self.audit_entries,
            "source_verify": self.source_report.to_dict(), "target_verify": self.target_report.to_dict(),
        }


def _count(conn: IndexBackend, table: str) -> int:
    return int(conn.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0])


def _check_empty(target: Store) -> None:
    held = {t: _count(target._index, t) for t in ("versions", "audit_log")}
    if any(held.values()):
        raise InvalidInputError(
            f"the target store {target.location} must be empty, got {held['versions']} version(s) and "
            f"{held['audit_log']} audit entries; copy into a new database or folder, or move single skills with export/import"
        )


def _copy_blobs(source: Store, target: Store) -> tuple[int, int]:
    """Every blob the source index names, re-hashed, written to the target's blob store first."""
    count = total = 0
    for digest, size in source._index.execute("SELECT digest, size FROM blobs ORDER BY digest").fetchall():
        data = source._blobs.read(digest, size=int(size), used_by="the store being copied")
        target._blobs.put(data)
        count, total = count + 1, total + len(data)
    return count, total


def _copy_rows(source: IndexBackend, target: IndexBackend) -> dict[str, int]:
    """Insert every row in the source's order; row ids are renumbered by the target."""
    ids: dict[str, dict[int, int]] = {}
    target.executemany(
        "INSERT INTO blobs (digest, size) VALUES (?, ?) ON CONFLICT DO NOTHING",
        source.execute("SELECT digest, size FROM blobs ORDER BY digest").fetchall(),
    )
    for table, (columns, refs) in _ROWS.items():
        mapping = ids.setdefault(table, {})
        insert = f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' * len(columns))})"
        for row in source.execute(f"SELECT id, {', '.join(columns)} FROM {table} ORDER BY id").fetchall():
            values = [
                ids[refs[c]][v] if c in refs and v is not None else v for c, v in zip(columns, row[1:])
            ]
            mapping[int(row[0])] = target.insert(insert, values)
    for table, (owner, owner_table) in _FILES.items():
        rows = source.execute(f"SELECT {owner}, role, digest, size FROM {table} ORDER BY {owner}, role").fetchall()
        target.executemany(
            f"INSERT INTO {table} ({owner}, role, digest, size) VALUES (?, ?, ?, ?)",
            [(ids[owner_table][int(o)], role, digest, size) for o, role, digest, size in rows],
        )
    return {table: len(mapping) for table, mapping in ids.items()}


def _same_content(source: Store, target: Store) -> list[str]:
    """Versions or artifacts whose identity or digest differs between the two stores."""
    problems = []
    for table, key in (("versions", "identity"), ("artifacts", "digest")):
        sql = f"SELECT {key} FROM {table} ORDER BY id"
        a = [r[0] for r in source._index.execute(sql).fetchall()]
        b = [r[0] for r in target._index.execute(sql).fetchall()]
        if a != b:
            problems.append(f"the copy's {table} do not match the source's (by {key}); the target is damaged, delete it and copy again")
    return problems


def copy_store(source: Store, target: Store) -> CopyReport:
    """Copy everything in ``source`` into the empty store ``target`` and verify both.

    Raises InvalidInputError if the target holds anything, StoreIntegrityError if a source blob is
    damaged (nothing is written to the target index then) or the copy does not match the source.
    """
    if source.location == target.location:
        raise InvalidInputError(f"copy-store needs two different stores, got {source.location} twice")
    target.check_writable()
    _check_empty(target)
    blobs, total = _copy_blobs(source, target)
    entries = audit.load_entries(source._index)
    with target._index.write_transaction() as conn:
        _check_empty(target)
        counts = _copy_rows(source._index, conn)
        index.set_store_info(conn, "store_id", source.store_id)
        for key in SETTING_NAMES.values():  # store settings travel with the store
            value = index.store_info(source._index, key)
            if value is not None:
                index.set_store_info(conn, key, value)
        audit.insert_entries(conn, entries)
        audit.append_entry(
            conn, "copied", name=None, subject="store", created_at=index.utc_now(),
            detail={"from": source.location, "to": target.location, "versions": counts["versions"],
                    "artifacts": counts["artifacts"], "blobs": blobs},
        )
    target.store_id = source.store_id
    mismatch = _same_content(source, target)
    if mismatch:
        raise StoreIntegrityError("; ".join(mismatch))
    return CopyReport(
        source=source.location, target=target.location, versions=counts["versions"], artifacts=counts["artifacts"],
        blobs=blobs, bytes=total, audit_entries=len(entries) + 1,
        source_report=source.verify(), target_report=target.verify(),
    )
