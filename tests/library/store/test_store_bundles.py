"""Bundles: export/import round trips keep lineage; unsafe or inconsistent archives change nothing."""

from __future__ import annotations

import hashlib
import io
import json
import tarfile
from pathlib import Path

import pytest

from kinetome.library.errors import BundleError
from kinetome.library.store import MAX_MEMBER_BYTES, Store, export_bundle, import_bundle
from kinetome.library.store.bundle_tar import gzip_bytes
from tests.store_backends import snapshot


def _populate(store: Store) -> None:
    store.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50}, meta={"description": "reach", "seed": 1})
    store.add("reach", {"spec.json": b'{"reach": 2}', "params.safetensors": b"P2" * 50}, parent="reach@1", reason="retrained", meta={"variant": "heavy"})
    store.add("carry", {"spec.json": b'{"carry": 1}', "params.safetensors": b"C" * 6000}, parent="reach@2", reason="retrained")
    store.attach_model("reach@2", "duration", {"table.bin": b"dur-1"}, {"held_out_error": 0.3})
    store.attach_model("reach@2", "duration", {"table.bin": b"dur-2"}, {"held_out_error": 0.2})
    store.attach_model("carry@1", "end_state", {"mix.safetensors": b"end"})
    store.add_note("reach@1", "first try")


@pytest.fixture
def source(new_store):
    s = new_store("source")
    _populate(s)
    yield s
    s.close()


@pytest.fixture
def target(new_store):
    s = new_store("target")
    s.add("keep", {"spec.json": b"already here"})
    yield s
    s.close()


# -- round trips -----------------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".tar", ".tar.gz"])
def test_round_trip_keeps_lineage_models_and_notes(source, target, tmp_path, suffix):
    path = export_bundle(source, "carry@1", tmp_path / f"carry{suffix}")
    assert path == tmp_path / f"carry{suffix}"
    with open(path, "rb") as f:
        assert (f.read(2) == b"\x1f\x8b") == suffix.endswith(".gz")  # gzip magic number (RFC 1952)

    report = import_bundle(target, path)
    imported = report.versions
    assert [v.ref for v in imported] == ["reach@1", "reach@2", "carry@1"]
    assert report.added == ("reach@1", "reach@2", "carry@1") and report.warnings == ()
    assert [v.reason for v in imported] == ["registered", "retrained", "retrained"]  # reasons are kept
    assert [v.ref for v in target.lineage("carry@1")] == ["carry@1", "reach@2", "reach@1"]
    for v in imported:
        original = source.get(v.ref)
        assert v.digests == original.digests and v.identity == original.identity and v.meta == original.meta
        assert v.origin == {"store": source.store_id, "ref": original.ref, "created_at": original.created_at}
        for role in v.roles:
            assert target.read_file(v, role) == source.read_file(original, role)
    assert [(m.ref, target.read_model(m, "table.bin")) for m in target.models("reach@2", all_revisions=True)] == [
        ("reach@2/duration#1", b"dur-1"),
        ("reach@2/duration#2", b"dur-2"),
    ]
    assert target.get_model("reach@2", "duration", revision=1).meta["held_out_error"] == 0.3
    assert [n.text for n in target.notes("reach@1")] == ["first try"]
    assert target.verify().ok

    # importing the same bundle again reuses every version and artifact revision
    before = snapshot(target)
    again = import_bundle(target, path)
    assert again.versions == imported and again.added == ()
    assert snapshot(target) == before


def test_import_reuses_versions_with_the_same_identity(source, new_store, tmp_path):
    path = export_bundle(source, "reach@2", tmp_path / "reach.tar")
    with new_store("other") as other:
        other.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50}, meta={"mine": True})  # same as source reach@1
        report = import_bundle(other, path)
        assert [v.ref for v in report.versions] == ["reach@1", "reach@2"] and report.added == ("reach@2",)
        assert report.versions[0].meta == {"mine": True} and report.versions[0].origin is None  # reused as it was
        assert report.versions[1].parent == "reach@1"


def test_export_without_lineage(source, target, tmp_path):
    path = export_bundle(source, "carry", tmp_path, with_lineage=False)
    assert path.name == "carry-1.kinetome.tar.gz"
    (v,) = import_bundle(target, path).versions
    assert v.ref == "carry@1" and v.parent is None  # the parent is not in this store
    assert v.parent_identity == source.get("reach@2").identity and v.identity == source.get("carry@1").identity
    assert target.verify().ok


def test_export_is_deterministic(source, tmp_path):
    a = export_bundle(source, "carry@1", tmp_path / "a.tar.gz")
    b = export_bundle(source, "carry@1", tmp_path / "b.tar.gz")
    assert a.read_bytes() == b.read_bytes()
    members = _members(a)
    assert [m.name for m, _ in members[:2]] == ["seal.json", "manifest.json"]
    manifest = json.loads(members[1][1])
    assert manifest["format"] == "kinetome-bundle" and manifest["format_version"] == 2 and manifest["root"] == "carry@1"
    assert "ISO 12100" in manifest["notice"]
    seal = json.loads(members[0][1])
    assert seal["manifest_sha256"] == hashlib.sha256(members[1][1]).hexdigest()
    assert seal["root_identity"] == source.get("carry@1").identity


# -- malicious and broken archives -----------------------------------------------------


def _members(path: Path) -> list[tuple[tarfile.TarInfo, bytes]]:
    """Members of a bundle we exported ourselves (trusted), manifest first."""
    with tarfile.open(path, "r:*") as tar:
        return [(m, tar.extractfile(m).read()) for m in tar.getmembers()]


def _reg(name: str, data: bytes) -> tuple[tarfile.TarInfo, bytes]:
    info = tarfile.TarInfo(name)
    info.size = len(data)
    return info, data


def _special(name: str, kind: bytes, linkname: str = "") -> tuple[tarfile.TarInfo, bytes]:
    info = tarfile.TarInfo(name)
    info.type = kind
    info.linkname = linkname
    return info, b""


def _write(path: Path, members, *, gz: bool = False, raw_tail: bytes = b"") -> Path:
    buf = io.BytesIO()
    with tarfile.open(fileobj=buf, mode="w", format=tarfile.PAX_FORMAT) as tar:
        for info, data in members:
            tar.addfile(info, io.BytesIO(data) if info.isreg() else None)
    data = buf.getvalue() + raw_tail
    path.write_bytes(gzip_bytes(data) if gz else data)
    return path


def _blob_names(members) -> list[str]:
    return [m.name for m, _ in members if m.name.startswith("blobs/")]


def _with_manifest(members, data: bytes):
    """Replace the manifest and re-seal it, as a careful editor would: the checks behind the seal must still hold."""
    seal = json.dumps({"format": "kinetome-bundle-seal", "manifest_sha256": hashlib.sha256(data).hexdigest(), "root_identity": "0" * 64})
    out = []
    for m, d in members:
        if m.name == "manifest.json":
            out.append(_reg("manifest.json", data))
        elif m.name == "seal.json":
            out.append(_reg("seal.json", seal.encode()))
        else:
            out.append((m, d))
    return out


def _edit_manifest(members, fn):
    (info, data) = members[1]
    assert info.name == "manifest.json"
    doc = json.loads(data)
    fn(doc)
    return _with_manifest(members, json.dumps(doc).encode())


def _replace(members, name, new):
    return [new if m.name == name else (m, d) for m, d in members]


def _first_blob(members) -> tuple[str, bytes]:
    m, d = next((m, d) for m, d in members if m.name.startswith("blobs/"))
    return m.name, d


def _size_plus_one(members):
    name, _ = _first_blob(members)
    digest = name.split("/")[1]

    def fn(doc):
        doc["blobs"][digest] += 1
        for owner in [*doc["versions"], *doc["artifacts"]]:
            for spec in owner["files"].values():
                if spec["digest"] == digest:
                    spec["size"] += 1

    return _edit_manifest(members, fn)


def _forged_huge_header(members, path: Path) -> Path:
    """A valid manifest, then a header that claims a 300 MiB member (the data never follows)."""
    manifest_info, manifest = _reg("manifest.json", members[1][1])
    huge = tarfile.TarInfo(_first_blob(members)[0])
    huge.size = 300 * 1024**2
    body = manifest_info.tobuf(format=tarfile.USTAR_FORMAT) + manifest + b"\0" * (-len(manifest) % 512)
    path.write_bytes(body + huge.tobuf(format=tarfile.USTAR_FORMAT) + b"x" * 1024)
    return path


EVIL = b"#!/bin/sh\necho pwned\n"
OTHER = b"an extra blob nobody listed"
OTHER_NAME = f"blobs/{hashlib.sha256(OTHER).hexdigest()}"

# (id, build(members, path) -> archive path, import kwargs, expected message regex)
CASES = [
    ("absolute-path", lambda ms, p: _write(p, ms + [_reg("/etc/evil", EVIL)]), {}, r"member '/etc/evil' has an absolute path"),
    ("dotdot", lambda ms, p: _write(p, ms + [_reg("../evil", EVIL)]), {}, r"member '../evil' has a '\.\.' component"),
    ("dotdot-inside", lambda ms, p: _write(p, ms + [_reg("blobs/../../evil", EVIL)]), {}, r"member 'blobs/\.\./\.\./evil' has a '\.\.' component"),
    ("symlink", lambda ms, p: _write(p, _replace(ms, _first_blob(ms)[0], _special(_first_blob(ms)[0], tarfile.SYMTYPE, "/etc/passwd"))), {},
     r"member 'blobs/[0-9a-f]{64}' is a symbolic link \(to '/etc/passwd'\)"),
    ("symlink-gzip", lambda ms, p: _write(p, ms + [_special("blobs/link", tarfile.SYMTYPE, "../../x")], gz=True), {}, r"member 'blobs/link' is a symbolic link"),
    ("hardlink", lambda ms, p: _write(p, ms + [_special("evil", tarfile.LNKTYPE, "manifest.json")]), {}, r"member 'evil' is a hard link \(to 'manifest.json'\)"),
    ("char-device", lambda ms, p: _write(p, ms + [_special("blobs/dev", tarfile.CHRTYPE)]), {}, r"member 'blobs/dev' is a device file"),
    ("block-device", lambda ms, p: _write(p, ms + [_special("sda", tarfile.BLKTYPE)]), {}, r"member 'sda' is a device file"),
    ("fifo", lambda ms, p: _write(p, ms + [_special("pipe", tarfile.FIFOTYPE)]), {}, r"member 'pipe' is a FIFO"),
    ("directory", lambda ms, p: _write(p, [_special("blobs", tarfile.DIRTYPE)] + ms), {}, r"member 'blobs' is a directory"),
    ("oversized-member", lambda ms, p: _write(p, ms), {"max_member_bytes": 5000},
     r"member 'blobs/[0-9a-f]{64}' is 6000 bytes, over the per-member limit of 5000 bytes"),
    ("oversized-header-default-limit", _forged_huge_header, {},
     rf"member 'blobs/[0-9a-f]{{64}}' is {300 * 1024**2} bytes, over the per-member limit of {MAX_MEMBER_BYTES} bytes"),
    ("total-over-limit", lambda ms, p: _write(p, ms), {"max_total_bytes": 8000},
     r"member 'blobs/[0-9a-f]{64}' brings the archive to \d+ bytes, over the total limit of 8000"),
    ("extra-blob-member", lambda ms, p: _write(p, ms + [_reg(OTHER_NAME, OTHER)]), {}, rf"member '{OTHER_NAME}' is not listed in manifest.json"),
    ("extra-other-member", lambda ms, p: _write(p, ms + [_reg("notes.txt", b"hi")]), {}, r"member 'notes.txt' is not listed in manifest.json"),
    ("missing-member", lambda ms, p: _write(p, [x for x in ms if x[0].name != _first_blob(ms)[0]]), {},
     r"manifest.json lists blob [0-9a-f]{64} \(used by .+\) but the archive has no member 'blobs/[0-9a-f]{64}'"),
    ("digest-mismatch", lambda ms, p: _write(p, _replace(ms, _first_blob(ms)[0], _reg(_first_blob(ms)[0], bytes(len(_first_blob(ms)[1]))))), {},
     r"member 'blobs/[0-9a-f]{64}' does not match its name: its content has sha256 [0-9a-f]{64}"),
    ("size-mismatch", lambda ms, p: _write(p, _size_plus_one(ms)), {}, r"member 'blobs/[0-9a-f]{64}' has (\d+) bytes but manifest.json says \d+"),
    ("duplicate-member", lambda ms, p: _write(p, ms + [ms[2]]), {}, r"member 'blobs/[0-9a-f]{64}' appears twice"),
    ("bad-manifest-json", lambda ms, p: _write(p, _with_manifest(ms, b'{"format": "kinetome-bundle",')), {},
     r"member 'manifest.json' is not valid JSON: .* at line 1 column 30"),
    ("manifest-not-utf8", lambda ms, p: _write(p, _with_manifest(ms, b"\xff\xfe{}")), {}, r"member 'manifest.json' is not UTF-8"),
    ("no-manifest", lambda ms, p: _write(p, [ms[0]] + ms[2:]), {}, r"has no member 'manifest.json'; it is not a kinetome bundle"),
    ("unsealed-edit", lambda ms, p: _write(p, [ms[0], _reg("manifest.json", ms[1][1].replace(b'"first try"', b'"first tri"'))] + ms[2:]), {},
     r"member 'manifest.json' has sha256 [0-9a-f]{64}, but 'seal.json' seals .*was changed after export"),
    ("no-seal", lambda ms, p: _write(p, ms[1:]), {}, r"the bundle has no member 'seal.json'"),
    ("manifest-wrong-identity", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d["versions"][1].update(reason="revised"))), {},
     r"versions\[1\]\.identity must be the identity of its files, reason and parent"),
    ("manifest-wrong-format", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d.update(format="zip"))), {}, r"member 'manifest.json': format must be 'kinetome-bundle', got 'zip'"),
    ("manifest-bad-ref", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d["versions"][0].update(ref="Reach@1"))), {}, r"versions\[0\]\.ref must be a ref name@N, got 'Reach@1'"),
    ("manifest-bad-reason", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d["versions"][1].update(reason="stolen"))), {}, r"versions\[1\]\.reason must be one of"),
    ("manifest-child-first", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d["versions"].reverse())), {}, r"versions\[0\]\.parent must come earlier in the list"),
    ("manifest-bad-digest", lambda ms, p: _write(p, _edit_manifest(ms, lambda d: d["versions"][0]["files"]["spec.json"].update(digest="../../etc"))), {},
     r"versions\[0\]\.files\['spec.json'\]\.digest must be 64 lowercase hex characters, got '\.\./\.\./etc'"),
    ("not-a-tar", lambda ms, p: (p.write_bytes(b"PK\x03\x04 this is a zip, not a tar" * 40), p)[1], {}, r"is not a readable tar or tar.gz archive"),
    ("truncated-gzip", lambda ms, p: (p.write_bytes(_write(p, ms, gz=True).read_bytes()[:-200]), p)[1], {}, r"\(Compressed file ended before the end-of-stream marker was reached\)"),
]


@pytest.mark.parametrize("case_id, build, kwargs, message", CASES, ids=[c[0] for c in CASES])
def test_unsafe_or_broken_bundles_are_refused_and_change_nothing(source, target, tmp_path, case_id, build, kwargs, message):
    good = export_bundle(source, "carry@1", tmp_path / "good.tar")
    members = _members(good)
    assert [m.name for m, _ in members[:2]] == ["seal.json", "manifest.json"] and len(_blob_names(members)) == 9
    archive = build(members, tmp_path / f"{case_id}.tar")
    # a store that already shares content with the bundle, so a partial write would show
    target.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50})
    before = snapshot(target)

    with pytest.raises(BundleError, match=message):
        import_bundle(target, archive, **kwargs)

    assert snapshot(target) == before
    assert not target._blobs.temp_files()


def test_absolute_path_survives_tar_writing():
    """Guard for the table above: tarfile keeps a leading '/' in names it writes."""
    buf = io.BytesIO()
    with tarfile.open(fileobj=buf, mode="w", format=tarfile.PAX_FORMAT) as tar:
        info, data = _reg("/etc/evil", EVIL)
        tar.addfile(info, io.BytesIO(data))
    buf.seek(0)
    with tarfile.open(fileobj=buf, mode="r") as tar:
        assert tar.getnames() == ["/etc/evil"]


def test_missing_bundle_file(target, tmp_path):
    with pytest.raises(BundleError, match=r"must be an existing file"):
        import_bundle(target, tmp_path / "nope.tar")
