"""Artifacts of a version: stored evidence (option models, check results, sweeps, proposals)
with the identities, task, settings and software it was computed on, a digest, and lookup for reuse."""

from __future__ import annotations

import difflib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from kinetome.library.errors import InvalidInputError, NotFoundError
from kinetome.library.store import index
from kinetome.library.store.identity import artifact_digest, lookup_key
from kinetome.library.store.metadata import canonical_json, canonical_meta
from kinetome.library.store.names import validate_kind
from kinetome.library.store.records import ArtifactRecord, is_digest

__all__ = ["ArtifactMethods", "Provenance", "provenance"]


@dataclass(frozen=True)
class Provenance:
    """Checked provenance of an artifact: identities, and canonical JSON text of the other parts."""

    computed_on: list[str]
    task: str
    settings: str
    software: str
    meta: str

    def digest(self, kind: str, files: Mapping[str, str]) -> str:
        return artifact_digest(
            kind=kind,
            computed_on=self.computed_on,
            task=json.loads(self.task),
            settings=json.loads(self.settings),
            software=json.loads(self.software),
            files=files,
            meta=json.loads(self.meta),
        )


def lookup_key_of(kind: str, p: Provenance) -> str:
    return lookup_key(kind, p.computed_on, json.loads(p.task), json.loads(p.settings))


def provenance(
    computed_on: Sequence[str] | None,
    task: Mapping | None,
    settings: Mapping | None,
    software: Mapping | None,
    meta: Mapping | None,
    *,
    default_identity: str,
) -> Provenance:
    """Check the parts of an artifact's provenance; ``computed_on`` defaults to the owner's identity."""
    ids = [default_identity] if computed_on is None else list(computed_on)
    if isinstance(computed_on, str) or not ids:
        raise InvalidInputError(f"computed_on must be a non-empty list of version identities, got {computed_on!r:.80}")
    for i, identity in enumerate(ids):
        if not is_digest(identity):
            raise InvalidInputError(
                f"computed_on[{i}] must be a version identity (64 lowercase hex characters, "
                f"VersionRecord.identity), got {identity!r:.80}"
            )
    return Provenance(
        ids,
        canonical_meta(task, what="task"),
        canonical_meta(settings, what="settings"),
        canonical_meta(software, what="software"),
        canonical_meta(meta, what="meta"),
    )


class ArtifactMethods:
    """Mixed into ``Store``: needs ``_index``, ``_row``, ``_row_id``, ``_blobs`` and ``_store_files``."""

    def attach_artifact(
        self,
        ref: str,
        kind: str,
        files: Mapping[str, bytes],
        *,
        computed_on: Sequence[str] | None = None,
        task: Mapping | None = None,
        settings: Mapping | None = None,
        software: Mapping | None = None,
        meta: Mapping | None = None,
    ) -> ArtifactRecord:
        """Attach a new revision of evidence ``kind`` to a version.

        ``computed_on`` lists the identities it was computed on (default: the version's
        own). Files and provenance identical to the latest revision of ``kind`` return
        that revision unchanged.
        """
        from kinetome.library.store.store import check_files

        validate_kind(kind)
        row_id, record = self._row(ref)
        p = provenance(computed_on, task, settings, software, meta, default_identity=record.identity)
        entries = self._store_files(check_files(files, what="artifact files"))
        digests = {e.role: e.digest for e in entries}
        lookup = lookup_key_of(kind, p)
        with self._index.write_transaction() as conn:
            aid = index.find_artifact_by_content(conn, row_id, kind, files_key=index.content_key(digests), lookup=lookup)
            if aid is None:
                aid = index.insert_artifact(
                    conn, version_row=row_id, kind=kind, files=entries, computed_on_json=canonical_json(p.computed_on),
                    task_json=p.task, settings_json=p.settings, software_json=p.software, meta_json=p.meta,
                    lookup=lookup, digest=p.digest(kind, digests), created_at=index.utc_now(),
                )
        return index.load_artifacts(self._index, "a.id = ?", (aid,))[0]

    def artifacts(self, ref: str, *, kind: str | None = None, all_revisions: bool = False) -> list[ArtifactRecord]:
        """Artifacts attached to a version: the latest revision of each kind, or every revision."""
        row_id = self._row_id(ref)
        where, params = "a.version_id = ?", (row_id,)
        if kind is not None:
            where, params = where + " AND a.kind = ?", (row_id, validate_kind(kind))
        if not all_revisions:
            where += (
                " AND a.revision = (SELECT MAX(revision) FROM artifacts a2"
                " WHERE a2.version_id = a.version_id AND a2.kind = a.kind)"
            )
        return index.load_artifacts(self._index, where, params)

    def get_artifact(self, ref: str, kind: str, *, revision: int | None = None) -> ArtifactRecord:
        """One artifact revision (the latest if ``revision`` is None)."""
        from kinetome.library.store.store import _number_ranges

        validate_kind(kind)
        row_id, record = self._row(ref)
        revisions = index.load_artifacts(self._index, "a.version_id = ? AND a.kind = ?", (row_id, kind))
        if not revisions:
            kinds = sorted({a.kind for a in self.artifacts(record.ref)})
            have = ", ".join(kinds) if kinds else "none"
            close = difflib.get_close_matches(kind, kinds, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise NotFoundError(
                f"{record.ref} has no {kind!r} artifact; attached kinds: {have}; {hint}"
                f"fit option models with `kinetome fit {record.ref}`"
            )
        if revision is None:
            return revisions[-1]
        for a in revisions:
            if a.revision == revision:
                return a
        raise NotFoundError(
            f"{record.ref}/{kind}#{revision} does not exist; {kind} has revisions "
            f"{_number_ranges([a.revision for a in revisions])}"
        )

    def read_artifact(self, artifact: ArtifactRecord, role: str) -> bytes:
        """The bytes of one file of an artifact revision, re-hashed."""
        entry = artifact.file(role)
        return self._blobs.read(entry.digest, size=entry.size, used_by=f"{artifact.ref} {role}")

    def find_artifact(
        self,
        kind: str,
        *,
        computed_on: Sequence[str],
        task: Mapping | None,
        settings: Mapping | None,
        software: Mapping | None = None,
    ) -> ArtifactRecord | None:
        """The newest ``kind`` computed on these identities (in order) for this task and settings,
        or None. With ``software``, only evidence computed with exactly those versions counts."""
        validate_kind(kind)
        p = provenance(computed_on, task, settings, software, None, default_identity="")
        for aid in index.find_artifacts_by_key(self._index, kind, lookup_key_of(kind, p)):
            found = index.load_artifacts(self._index, "a.id = ?", (aid,))[0]
            if software is None or found.software_json == p.software:
                return found
        return None

    # -- option models: artifacts of kind "option-models" (the names the first wave used) --

    def attach_model(self, ref: str, kind: str, files: Mapping[str, bytes], meta: Mapping | None = None) -> ArtifactRecord:
        """Attach option models (``kind`` is usually ``option-models``) computed on the version itself."""
        return self.attach_artifact(ref, kind, files, meta=meta)

    def models(self, ref: str, *, all_revisions: bool = False) -> list[ArtifactRecord]:
        return self.artifacts(ref, all_revisions=all_revisions)

    def get_model(self, ref: str, kind: str, *, revision: int | None = None) -> ArtifactRecord:
        return self.get_artifact(ref, kind, revision=revision)

    def read_model(self, model: ArtifactRecord, role: str) -> bytes:
        return self.read_artifact(model, role)
