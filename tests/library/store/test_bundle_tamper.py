"""Tamper-evident bundles: any changed, added or removed byte in any part is refused; the store is unchanged."""

from __future__ import annotations

import io
import json
import tarfile
from pathlib import Path

import pytest

from kinetome.library.errors import BundleError
from kinetome.library.store import Store, export_bundle, import_bundle

from tests.store_backends import snapshot

RECORD = json.dumps({"method": "retrain", "seed": 3, "config": {"env_step_budget": 2048}}).encode()
EVALUATION = json.dumps({"trained_task": {"parent": "3/64 = 0.05", "child": "58/64 = 0.91"}}).encode()


@pytest.fixture
def bundle(new_store, tmp_path) -> Path:
    """A bundle with every part import trusts: lineage, metrics, notes, models and other artifacts."""
    with new_store("source") as s:
        s.register("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50}, meta={"description": "reach"})
        child = s.add(
            "reach",
            {"spec.json": b'{"reach": 1}', "params.safetensors": b"P2" * 50, "record.json": RECORD, "evaluation.json": EVALUATION},
            parent="reach@1",
            reason="retrained",
            meta={"wall_time_s": 12.5, "success_after": 0.91},
        ).version
        s.add_note("reach@2", "works with the steel parts")
        s.attach_model("reach@2", "option-models", {"models.json": b'{"duration": [1, 2]}'}, {"episodes": 200})
        s.attach_artifact(
            "reach@2", "check-result", {"result.json": b'{"handoffs": ["composes"]}'},
            computed_on=[child.identity], task={"env": "kinetome/BenchArm-v0", "variant": "nominal"},
            settings={"episodes": 100, "seed": 0}, software={"numpy": "2.0"},
        )
        yield export_bundle(s, "reach@2", tmp_path / "reach.tar")


@pytest.fixture
def target(new_store):
    s = new_store("target")
    s.register("keep", {"spec.json": b"already here"})
    yield s
    s.close()


def _inflate(gz: bytes) -> bytes | None:
    """The tar bytes inside gzip data, or None where the deflate stream or its trailer is broken."""
    import zlib

    try:
        inflate = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS)
        out = inflate.decompress(gz)
    except zlib.error:
        return None
    return out if inflate.eof and not inflate.unused_data else None


def _inflates_to(gz: bytes, tar_bytes: bytes | None) -> bool:
    return tar_bytes is not None and _inflate(gz) == tar_bytes


def _refused(target: Store, data: bytes, path: Path, what: str) -> None:
    before = snapshot(target)
    path.write_bytes(data)
    with pytest.raises(BundleError):
        import_bundle(target, path)
        pytest.fail(f"{what} was accepted")
    assert snapshot(target) == before, what
    assert not target._blobs.temp_files()


def _member_spans(data: bytes) -> list[tuple[str, int, int, int]]:
    """(name, header offset, data offset, data size) of each member of an uncompressed tar."""
    out = []
    with tarfile.open(fileobj=io.BytesIO(data), mode="r:") as tar:
        for m in tar.getmembers():
            out.append((m.name, m.offset, m.offset_data, m.size))
    return out


def test_the_untouched_bundle_imports(bundle, target, tmp_path):
    report = import_bundle(target, bundle)
    assert report.added == ("reach@1", "reach@2")
    assert [a.kind for a in target.artifacts("reach@2")] == ["check-result", "option-models"]


def test_a_flipped_byte_in_any_member_is_refused(bundle, target, tmp_path):
    data = bundle.read_bytes()
    spans = _member_spans(data)
    names = [n for n, *_ in spans]
    assert names[:2] == ["seal.json", "manifest.json"] and len(names) == 2 + 7
    positions: dict[int, str] = {}
    for name, header, start, size in spans:
        for k in (0, 100, 124, 148, 257, 345, 511):  # name, size, checksum, magic, prefix, end of header
            positions[header + k] = f"{name} header byte {k}"
        for k in sorted({0, size // 3, size // 2, size - 1}):
            positions[start + k] = f"{name} data byte {k}"
        if size % 512:
            positions[start + size] = f"{name} padding"
    end = spans[-1][2] + spans[-1][3] + (-spans[-1][3] % 512)
    positions[end] = "end-of-archive block"
    positions[len(data) - 1] = "last byte of the record padding"
    for pos, what in sorted(positions.items()):
        flipped = bytearray(data)
        flipped[pos] ^= 0x01
        _refused(target, bytes(flipped), tmp_path / "flipped.tar", what)


def test_added_and_removed_bytes_are_refused(bundle, target, tmp_path):
    data = bundle.read_bytes()
    manifest_start = _member_spans(data)[1][2]
    cases = {
        "one byte appended": data + b"\0",
        "last byte removed": data[:-1],
        "one byte inserted in the manifest": data[: manifest_start + 10] + b" " + data[manifest_start + 10 :],
        "one byte removed from the manifest": data[: manifest_start + 10] + data[manifest_start + 11 :],
    }
    for what, changed in cases.items():
        _refused(target, changed, tmp_path / "changed.tar", what)


def _rewrite(data: bytes, edit) -> bytes:
    """Re-pack a bundle as a well-formed tar after ``edit(name, bytes) -> bytes | None`` (None drops the member)."""
    out = io.BytesIO()
    with tarfile.open(fileobj=io.BytesIO(data), mode="r:") as src, tarfile.open(fileobj=out, mode="w", format=tarfile.PAX_FORMAT) as dst:
        for m in src.getmembers():
            new = edit(m.name, src.extractfile(m).read())
            if new is None:
                continue
            info = tarfile.TarInfo(m.name)
            info.size, info.mode, info.mtime = len(new), m.mode, 0
            info.uname = info.gname = ""
            dst.addfile(info, io.BytesIO(new))
    return out.getvalue()


def _edit_manifest(fn):
    def edit(name, content):
        if name != "manifest.json":
            return content
        doc = json.loads(content)
        fn(doc)
        return (json.dumps(doc, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode()

    return edit


def _set_success_after(doc):
    doc["versions"][1]["meta"]["success_after"] = 0.99


def _add_note(doc):
    doc["versions"][1]["notes"].append({"text": "approved for the line", "created_at": "2026-01-01T00:00:00.000000Z"})


def _retime(doc):
    doc["versions"][0]["created_at"] = "2020-01-01T00:00:00.000000Z"


def _artifact_setting(doc):
    doc["artifacts"][0]["settings"]["episodes"] = 1000


@pytest.mark.parametrize(
    "what, edit",
    [
        ("success figure in the manifest", _edit_manifest(_set_success_after)),
        ("note added in the manifest", _edit_manifest(_add_note)),
        ("timestamp in the manifest", _edit_manifest(_retime)),
        ("artifact settings in the manifest", _edit_manifest(_artifact_setting)),
        ("seal removed", lambda name, content: None if name == "seal.json" else content),
        ("seal edited", lambda name, content: content.replace(b'"manifest_sha256": "', b'"manifest_sha256": "0') if name == "seal.json" else content),
    ],
)
def test_well_formed_edits_of_any_part_are_refused(bundle, target, tmp_path, what, edit):
    data = bundle.read_bytes()
    _refused(target, _rewrite(data, edit), tmp_path / "edited.tar", what)


def test_an_extra_member_is_refused(bundle, target, tmp_path):
    buf = io.BytesIO(_rewrite(bundle.read_bytes(), lambda name, content: content))
    with tarfile.open(fileobj=buf, mode="a") as tar:
        info = tarfile.TarInfo("README.txt")
        info.size = 2
        tar.addfile(info, io.BytesIO(b"hi"))
    _refused(target, buf.getvalue(), tmp_path / "extra.tar", "an extra member")


@pytest.mark.parametrize("role", ["record.json", "evaluation.json", "models.json", "result.json"])
def test_a_changed_lineage_metrics_model_or_artifact_file_is_refused(bundle, target, tmp_path, role):
    """Swap a file's blob for other bytes and fix up the manifest digests as a careful editor would."""
    import hashlib

    data = bundle.read_bytes()
    with tarfile.open(fileobj=io.BytesIO(data), mode="r:") as tar:
        manifest = json.loads(tar.extractfile("manifest.json").read())
    owners = manifest["versions"] + manifest["artifacts"]
    old = next(o["files"][role]["digest"] for o in owners if role in o["files"])
    new_bytes = b'{"edited": true}'
    new = hashlib.sha256(new_bytes).hexdigest()

    def edit(name, content):
        if name == f"blobs/{old}":
            return new_bytes
        if name == "manifest.json":
            text = content.decode().replace(old, new)
            doc = json.loads(text)
            doc["blobs"][new] = len(new_bytes)
            return (json.dumps(doc, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode()
        return content

    changed = _rewrite(data, edit).replace(f"blobs/{old}".encode(), f"blobs/{new}".encode())
    _refused(target, changed, tmp_path / "swapped.tar", role)


def test_a_flipped_byte_in_a_gzip_bundle_is_refused(bundle, target, new_store, tmp_path):
    with new_store("source", create=False) as s:
        gz = export_bundle(s, "reach@2", tmp_path / "reach.tar.gz")
    data = gz.read_bytes()
    assert import_bundle(target, gz).added == ("reach@1", "reach@2")
    with new_store("fresh") as fresh:
        step = max(1, len(data) // 150)
        positions = sorted(set(range(0, len(data), step)) | {3, 4, 8, 9, len(data) - 1})
        same_content = 0
        for pos in positions:
            flipped = bytearray(data)
            flipped[pos] ^= 0xFF
            in_deflate_stream = 10 <= pos < len(data) - 8  # past the 10-byte header (checked byte for byte), before the trailer
            if in_deflate_stream and _inflates_to(bytes(flipped), _inflate(data)):
                # Deflate can spell the same bytes two ways (e.g. a back-reference into a run of tar
                # padding zeros at another distance): the archive, its CRC-32 and its seal are unchanged,
                # so nothing was altered and there is nothing to refuse. Rare: about 1 flip in 5,000.
                same_content += 1
                continue
            _refused(fresh, bytes(flipped), tmp_path / "flipped.tar.gz", f"gzip byte {pos} of {len(data)}")
        assert same_content <= len(positions) // 20, "almost every flip must change the archive and be refused"
        _refused(fresh, data + b"\0", tmp_path / "longer.tar.gz", "one byte appended to the gzip file")
