"""Damaged blobs: verify names the blob and every version and model revision using it."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.store import export_bundle

SHARED = b'{"kind": "joint_pd", "kp": 3.0}'


@pytest.fixture
def store(new_store):
    s = new_store()
    s.add("reach", {"spec.json": SHARED, "params.safetensors": b"p1" * 100})
    s.add("reach", {"spec.json": SHARED, "params.safetensors": b"p2" * 100}, parent="reach@1", reason="retrained")
    s.add("lift", {"spec.json": b"other spec", "params.safetensors": b"p3"})
    s.attach_model("lift@1", "end_state", {"table.bin": SHARED})
    s.attach_model("lift@1", "end_state", {"table.bin": b"rev2"})
    return s


def _blob_path(store, data: bytes):
    import hashlib

    digest = hashlib.sha256(data).hexdigest()
    return digest, Path(store.blobs_location) / "blobs" / digest[:2] / digest


def test_clean_store_verifies_ok(store):
    report = store.verify()
    assert report.ok and not report.problems and not report.orphans
    assert report.blobs_checked == 6 and report.versions_checked == 3 and report.artifacts_checked == 2


def test_flipped_byte_is_reported_with_every_user(store):
    digest, path = _blob_path(store, SHARED)
    raw = bytearray(path.read_bytes())
    raw[5] ^= 0x01
    path.write_bytes(bytes(raw))

    report = store.verify()
    assert not report.ok
    assert [p.digest for p in report.problems] == [digest]
    problem = report.problems[0]
    assert problem.problem == "corrupt" and problem.actual_size == len(SHARED) and problem.actual_digest != digest
    users = {(u.owner, u.role) for u in problem.used_by}
    assert users == {("reach@1", "spec.json"), ("reach@2", "spec.json"), ("lift@1/end_state#1", "table.bin")}
    assert report.damaged == ("lift@1/end_state#1", "reach@1", "reach@2")
    text = report.format_text()
    assert digest in text and "reach@1 (spec.json)" in text and "lift@1/end_state#1 (table.bin)" in text
    assert report.to_dict()["problems"][0]["digest"] == digest

    with pytest.raises(StoreIntegrityError, match=rf"blob {digest} \(reach@2 spec.json\) is corrupt.*sha256 is [0-9a-f]{{64}}"):
        store.read_file("reach@2", "spec.json")
    model = store.get_model("lift@1", "end_state", revision=1)
    with pytest.raises(StoreIntegrityError, match="lift@1/end_state#1 table.bin"):
        store.read_model(model, "table.bin")
    # undamaged files of the same version still read fine
    assert store.read_file("reach@2", "params.safetensors") == b"p2" * 100


def test_missing_blob_is_reported(store):
    digest, path = _blob_path(store, b"p3")
    path.unlink()
    report = store.verify()
    assert [(p.digest, p.problem) for p in report.problems] == [(digest, "missing")]
    assert [str(u) for u in report.problems[0].used_by] == ["lift@1 (params.safetensors)"]
    with pytest.raises(StoreIntegrityError, match="is missing"):
        store.read_file("lift@1", "params.safetensors")


def test_truncated_blob_is_reported(store):
    digest, path = _blob_path(store, b"p1" * 100)
    path.write_bytes(b"p1")
    (problem,) = store.verify().problems
    assert problem.digest == digest and problem.actual_size == 2 and problem.expected_size == 200


def test_export_refuses_damaged_content_and_leaves_no_file(store, tmp_path):
    _, path = _blob_path(store, SHARED)
    path.write_bytes(b"x" + path.read_bytes()[1:])
    out = tmp_path / "out"
    out.mkdir()
    with pytest.raises(StoreIntegrityError):
        export_bundle(store, "reach@2", out / "reach.tar")
    assert list(out.iterdir()) == []


def test_orphans_and_temp_files_do_not_fail_verify(store):
    stray = b"left by a killed add"
    digest, path = _blob_path(store, stray)
    path.parent.mkdir(exist_ok=True)
    path.write_bytes(stray)
    tmp = Path(store.blobs_location) / "tmp"
    (tmp / "blob-partial").write_bytes(b"half")
    report = store.verify()
    assert report.ok
    assert report.orphans == (path,)
    assert report.temp_files == (tmp / "blob-partial",)


def test_readding_identical_content_repairs_a_corrupt_blob(store):
    _, path = _blob_path(store, b"p3")
    path.write_bytes(b"p4")
    result = store.add("lift", {"spec.json": b"other spec", "params.safetensors": b"p3"})
    assert not result.created and result.version.ref == "lift@1"
    assert store.read_file("lift@1", "params.safetensors") == b"p3"
    assert store.verify().ok
