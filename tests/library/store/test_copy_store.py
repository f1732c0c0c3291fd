"""copy-store: a whole store moves embedded -> PostgreSQL -> embedded (and onto S3 blobs) unchanged."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError, StoreIntegrityError
from kinetome.library.store import Store, copy_store


def _fill(store: Store) -> None:
    store.register("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 64}, meta={"description": "reach"})
    store.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P2" * 64}, parent="reach@1", reason="retrained")
    store.add("lift", {"spec.json": b'{"lift": 1}'}, parent="reach@2", reason="retrained")
    store.promote("reach@2", task="heavy", reason="non-inferior", evidence={"child": "58/64 = 0.91"})
    store.attach_model("reach@2", "option-models", {"models.json": b'{"duration": 3}'}, {"episodes": 200})
    store.attach_artifact("lift@1", "check-result", {"result.json": b"{}"}, computed_on=[store.get("reach@2").identity, store.get("lift@1").identity],
                          task={"env": "kinetome/BenchArm-v0"}, settings={"episodes": 100}, software={"numpy": "2.0"})
    store.add_note("reach@1", "first try")


def _content(store: Store) -> dict:
    """Everything that must survive a copy: versions, files, currents, artifacts, notes, the audit log."""
    names = [s.name for s in store.list_skills()]
    versions = [v for n in names for v in store.history(n)]
    return {
        "versions": [(v.ref, v.identity, v.parent, v.reason, v.meta, v.created_at, v.files) for v in versions],
        "bytes": {(v.ref, f.role): store.read_file(v, f.role) for v in versions for f in v.files},
        "currents": {n: store.current_history(n) for n in names},
        "artifacts": [(a.ref, a.digest, a.computed_on, a.created_at, a.files) for v in versions for a in store.artifacts(v.ref, all_revisions=True)],
        "notes": {v.ref: store.notes(v.ref) for v in versions},
        "list": store.list_skills(),
    }


def test_embedded_to_postgresql_and_back(tmp_path, pg_url):
    with Store(tmp_path / "embedded") as source:
        _fill(source)
        expected, log = _content(source), source.audit_log()
        with Store(pg_url(), blobs=tmp_path / "shared") as team:
            report = copy_store(source, team)
            assert report.ok and (report.versions, report.artifacts, report.blobs) == (3, 2, 6)
            assert _content(team) == expected and team.store_id == source.store_id
            assert team.audit_log()[:-1] == log and team.audit_log()[-1].action == "copied"
            with Store(tmp_path / "back") as back:
                again = copy_store(team, back)
                assert again.ok and _content(back) == expected
                assert [e.action for e in back.audit_log()][-2:] == ["copied", "copied"]
                assert back.verify().ok


def test_the_target_must_be_empty_and_stays_untouched(tmp_path, pg_url):
    with Store(tmp_path / "a") as source, Store(pg_url(), blobs=tmp_path / "b") as target:
        _fill(source)
        target.register("mine", {"spec.json": b"mine"})
        with pytest.raises(InvalidInputError, match=r"target store .* must be empty, got 1 version\(s\) and 1 audit entries"):
            copy_store(source, target)
        assert [s.name for s in target.list_skills()] == ["mine"]
        with pytest.raises(InvalidInputError, match=r"two different stores"):
            copy_store(source, source)


def test_a_damaged_source_blob_stops_the_copy_before_any_row(tmp_path, pg_url):
    with Store(tmp_path / "a") as source, Store(pg_url(), blobs=tmp_path / "b") as target:
        _fill(source)
        digest = source.get("reach@1").file("params.safetensors").digest
        (Path(source.blobs_location) / "blobs" / digest[:2] / digest).write_bytes(b"rot")
        with pytest.raises(StoreIntegrityError, match=rf"blob {digest} .* is corrupt"):
            copy_store(source, target)
        assert target.list_skills() == [] and target.audit_log() == []


def test_copy_onto_s3_blobs(tmp_path, pg_url, s3_blobs):
    """S3 here is moto's emulator, not the real service."""
    with Store(tmp_path / "a") as source:
        _fill(source)
        expected = _content(source)
        with Store(pg_url(), blobs=s3_blobs()) as team:
            report = copy_store(source, team)
            assert report.ok and _content(team) == expected and team.blobs_location.startswith("s3://")
