"""``verify``: re-hash every blob, recompute every identity and artifact digest from the index rows,
follow the audit log's chain, and name every version and artifact a problem breaks.

The SQL here reads alike on both index backends; each backend adds the damage only it can see."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from kinetome.library.store.audit import audit_problems
from kinetome.library.store.blobs import BlobStore
from kinetome.library.store.identity import artifact_digest, version_identity
from kinetome.library.store.index_backend import IndexBackend

__all__ = ["BlobUse", "BlobProblem", "VerifyReport", "verify_store"]


@dataclass(frozen=True)
class BlobUse:
    """One user of a blob: a version (``name@N``) or an artifact revision (``name@N/kind#R``) and its role."""

    owner: str
    role: str

    def __str__(self) -> str:
        return f"{self.owner} ({self.role})"


@dataclass(frozen=True)
class BlobProblem:
    """A blob the index needs that is missing or whose content no longer matches its digest."""

    digest: str
    path: Path | str  # a file, or a URL in object storage
    problem: str  # "missing" | "corrupt"
    expected_size: int
    actual_size: int | None
    actual_digest: str | None
    used_by: tuple[BlobUse, ...]

    def __str__(self) -> str:
        users = ", ".join(str(u) for u in self.used_by) or "no version"
        if self.problem == "missing":
            what = f"is missing at {self.path}"
        else:
            what = (
                f"is corrupt at {self.path}: sha256 {self.actual_digest}, "
                f"{self.actual_size} bytes (expected {self.expected_size})"
            )
        return f"blob {self.digest} {what}; used by {users}"


@dataclass(frozen=True)
class VerifyReport:
    """Result of ``Store.verify()``; ``ok`` ignores orphans and temp files (harmless leftovers)."""

    root: Path | str  # the store folder, or its database URL
    blobs_checked: int
    bytes_checked: int
    versions_checked: int
    artifacts_checked: int
    problems: tuple[BlobProblem, ...]
    index_problems: tuple[str, ...]
    orphans: tuple[Path | str, ...]
    temp_files: tuple[Path | str, ...]

    @property
    def ok(self) -> bool:
        return not self.problems and not self.index_problems

    @property
    def damaged(self) -> tuple[str, ...]:
        """Every version and model ref that uses a damaged blob, sorted, each once."""
        return tuple(sorted({u.owner for p in self.problems for u in p.used_by}))

    def to_dict(self) -> dict:
        """JSON-ready form (for ``kinetome verify --json``)."""
        return {
            "ok": self.ok,
            "root": str(self.root),
            "blobs_checked": self.blobs_checked,
            "bytes_checked": self.bytes_checked,
            "versions_checked": self.versions_checked,
            "artifacts_checked": self.artifacts_checked,
            "problems": [
                {
                    "digest": p.digest,
                    "path": str(p.path),
                    "problem": p.problem,
                    "expected_size": p.expected_size,
                    "actual_size": p.actual_size,
                    "actual_digest": p.actual_digest,
                    "used_by": [{"owner": u.owner, "role": u.role} for u in p.used_by],
                }
                for p in self.problems
            ],
            "damaged": list(self.damaged),
            "index_problems": list(self.index_problems),
            "orphans": [str(p) for p in self.orphans],
            "temp_files": [str(p) for p in self.temp_files],
        }

    def format_text(self) -> str:
        return "\n".join(self.lines())

    def lines(self) -> list[str]:
        """Human-readable lines: problems first, then a summary."""
        out = [f"index: {p}" for p in self.index_problems]
        out += [str(p) for p in self.problems]
        if self.orphans:
            out.append(
                f"{len(self.orphans)} orphan blob file(s) not used by any version "
                "(harmless leftovers of interrupted adds)"
            )
        if self.temp_files:
            out.append(
                f"{len(self.temp_files)} temp file(s) beside the blobs "
                "(left by interrupted writes, or a write in progress)"
            )
        status = "ok" if self.ok else f"DAMAGED: {len(self.problems)} bad blob(s), {len(self.index_problems)} index problem(s)"
        out.append(
            f"{status}: {self.versions_checked} versions, {self.artifacts_checked} artifact revisions, "
            f"{self.blobs_checked} blobs ({self.bytes_checked} bytes) checked in {self.root}"
        )
        return out


def _index_problems(conn: IndexBackend) -> list[str]:
    problems = conn.integrity_problems()
    for (ref,) in conn.execute(
        "SELECT v.name || '@' || v.number FROM versions v"
        " WHERE NOT EXISTS (SELECT 1 FROM version_files f WHERE f.version_id = v.id)"
    ):
        problems.append(f"version {ref} has no files")
    for ref, role, fsize, bsize in conn.execute(
        "SELECT v.name || '@' || v.number, f.role, f.size, b.size FROM version_files f"
        " JOIN versions v ON v.id = f.version_id JOIN blobs b ON b.digest = f.digest WHERE f.size != b.size"
    ):
        problems.append(f"version {ref} file {role} records {fsize} bytes but its blob records {bsize}")
    return problems + _identity_problems(conn) + _artifact_problems(conn) + audit_problems(conn)


def _files_of(conn: IndexBackend, table: str, owner: str) -> dict[int, dict[str, str]]:
    out: dict[int, dict[str, str]] = {}
    for owner_id, role, digest in conn.execute(f"SELECT {owner}, role, digest FROM {table}"):
        out.setdefault(int(owner_id), {})[role] = digest
    return out


def _identity_problems(conn: IndexBackend) -> list[str]:
    """Recompute each version's identity from its files, reason and parent; flag rows that no longer match."""
    files = _files_of(conn, "version_files", "version_id")
    identities = {int(i): ident for i, ident in conn.execute("SELECT id, identity FROM versions")}
    problems = []
    rows = conn.execute("SELECT id, name, number, reason, identity, parent_id, parent_identity FROM versions ORDER BY id")
    for vid, name, number, reason, identity, parent_id, parent_identity in rows:
        ref = f"{name}@{number}"
        if parent_id is not None and identities.get(int(parent_id)) != parent_identity:
            problems.append(f"version {ref} records parent identity {str(parent_identity)[:12]} but its parent row has another identity; the index row was changed")
        expected = version_identity(name, files.get(int(vid), {}), parent_identity=parent_identity, reason=reason)
        if expected != identity:
            problems.append(
                f"version {ref} no longer matches its identity {str(identity)[:12]} (its files, reason, name or parent "
                f"give {expected[:12]}); the index row was changed: restore the index from a backup or re-import the version"
            )
    return problems


def _artifact_problems(conn: IndexBackend) -> list[str]:
    """Recompute each artifact's digest from its row and files; flag rows that no longer match."""
    files = _files_of(conn, "artifact_files", "artifact_id")
    problems = []
    rows = conn.execute(
        "SELECT a.id, v.name || '@' || v.number || '/' || a.kind || '#' || a.revision, a.kind, a.computed_on, a.task,"
        " a.settings, a.software, a.meta, a.digest FROM artifacts a JOIN versions v ON v.id = a.version_id ORDER BY a.id"
    )
    for aid, ref, kind, computed_on, task, settings, software, meta, digest in rows:
        try:
            expected = artifact_digest(
                kind=kind, computed_on=json.loads(computed_on), task=json.loads(task), settings=json.loads(settings),
                software=json.loads(software), files=files.get(int(aid), {}), meta=json.loads(meta),
            )
        except (ValueError, TypeError):
            expected = "unreadable"
        if expected != digest:
            problems.append(
                f"artifact {ref} no longer matches its digest {str(digest)[:12]} (its provenance, metadata or files "
                f"give {expected[:12]}); the index row was changed: restore the index from a backup or re-import it"
            )
    return problems


def _users(conn: IndexBackend, digests: list[str]) -> dict[str, list[BlobUse]]:
    out: dict[str, list[BlobUse]] = {d: [] for d in digests}
    for start in range(0, len(digests), 500):
        chunk = digests[start : start + 500]
        marks = ",".join("?" * len(chunk))
        for digest, owner, role in conn.execute(
            "SELECT f.digest, v.name || '@' || v.number, f.role FROM version_files f"
            f" JOIN versions v ON v.id = f.version_id WHERE f.digest IN ({marks})"
            " ORDER BY v.name, v.number, f.role",
            chunk,
        ):
            out[digest].append(BlobUse(owner, role))
        for digest, owner, role in conn.execute(
            "SELECT f.digest, v.name || '@' || v.number || '/' || a.kind || '#' || a.revision, f.role"
            " FROM artifact_files f JOIN artifacts a ON a.id = f.artifact_id JOIN versions v ON v.id = a.version_id"
            f" WHERE f.digest IN ({marks}) ORDER BY v.name, v.number, a.kind, a.revision, f.role",
            chunk,
        ):
            out[digest].append(BlobUse(owner, role))
    return out


def verify_store(conn: IndexBackend, blobs: BlobStore, root: Path | str) -> VerifyReport:
    """Check the index, re-hash every blob it lists, and list leftovers.

    A snapshot: a blob written by an add still in progress elsewhere may show as an orphan.
    """
    index_problems = _index_problems(conn)
    expected = {d: int(s) for d, s in conn.execute("SELECT digest, size FROM blobs ORDER BY digest")}
    (n_versions,) = conn.execute("SELECT COUNT(*) FROM versions").fetchone()
    (n_artifacts,) = conn.execute("SELECT COUNT(*) FROM artifacts").fetchone()
    bad: list[tuple[str, str, int | None, str | None]] = []
    total = 0
    for digest, size in expected.items():
        found = blobs.hash_stored(digest)
        if found is None:
            bad.append((digest, "missing", None, None))
            continue
        actual, actual_size = found
        total += actual_size
        if actual != digest or actual_size != size:
            bad.append((digest, "corrupt", actual_size, actual))
    users = _users(conn, [b[0] for b in bad])
    problems = tuple(
        BlobProblem(
            digest=d,
            path=blobs.where(d),
            problem=kind,
            expected_size=expected[d],
            actual_size=asize,
            actual_digest=adigest,
            used_by=tuple(users[d]),
        )
        for d, kind, asize, adigest in bad
    )
    orphans = tuple(blobs.strays(set(expected)))
    return VerifyReport(
        root=root,
        blobs_checked=len(expected),
        bytes_checked=total,
        versions_checked=int(n_versions),
        artifacts_checked=int(n_artifacts),
        problems=problems,
        index_problems=tuple(index_problems),
        orphans=orphans,
        temp_files=tuple(blobs.temp_files()),
    )
