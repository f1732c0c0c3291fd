"""Signed bundles: HMAC-SHA256 over the manifest with a shared key; stores that require signatures
refuse unsigned, mis-signed and re-sealed bundles and stay unchanged."""

from __future__ import annotations

import io
import json
import os
import tarfile
from pathlib import Path

import pytest

from kinetome.library.errors import BundleError, InvalidInputError, SignatureError, StoreIntegrityError
from kinetome.library.store import export_bundle, import_bundle
from kinetome.library.store.bundle_tar import bytes_member, write_canonical_tar
from kinetome.library.store.manifest import build_seal
from kinetome.library.store.signing import KEY_ENV_VAR, SigningKey, hmac_sha256, load_signing_key, signing_key_from

from tests.store_backends import raw_sql, snapshot

TEAM = b"0123456789abcdef0123456789abcdef-team"
OTHER = b"0123456789abcdef0123456789abcdef-other"


# -- the MAC and the keys --------------------------------------------------------------


@pytest.mark.parametrize(
    ("key", "data", "expected"),
    [
        # RFC 4231, section 4.2 (test case 1): 20 bytes of 0x0b, "Hi There"
        (b"\x0b" * 20, b"Hi There", "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
        # RFC 4231, section 4.3 (test case 2): key "Jefe"
        (b"Jefe", b"what do ya want for nothing?", "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    ],
)
def test_the_mac_reproduces_the_rfc_4231_vectors(key, data, expected):
    assert hmac_sha256(key, data) == expected
    assert hmac_sha256(key, data + b"!") != expected


def _key_file(tmp_path: Path, secret: bytes, name: str = "team.key", mode: int = 0o600) -> Path:
    path = tmp_path / name
    path.write_bytes(secret + b"\n")
    path.chmod(mode)
    return path


def test_a_key_file_is_read_without_its_line_break_and_never_shown(tmp_path):
    key = load_signing_key(_key_file(tmp_path, TEAM))
    assert key.secret == TEAM
    assert TEAM.decode() not in repr(key) and TEAM.hex() not in key.key_id and len(key.key_id) == 16
    assert load_signing_key(_key_file(tmp_path, OTHER, "other.key")).key_id != key.key_id
    assert load_signing_key(_key_file(tmp_path, TEAM, "group.key", 0o640)).key_id == key.key_id  # shared with a group


@pytest.mark.skipif(os.name != "posix", reason="file modes are POSIX")
@pytest.mark.parametrize(
    ("secret", "mode", "message"),
    [
        (TEAM, 0o644, r"must not be readable or writable by other users .* got mode 644; fix it with: chmod 600"),
        (TEAM, 0o660, r"writable by its group\), got mode 660"),
        (b"short", 0o600, r"must hold at least 32 bytes, got 5; make one with"),
    ],
)
def test_unsafe_or_weak_key_files_are_refused(tmp_path, secret, mode, message):
    with pytest.raises(InvalidInputError, match=message):
        load_signing_key(_key_file(tmp_path, secret, mode=mode))


def test_the_key_comes_from_the_option_else_the_environment(tmp_path, monkeypatch):
    monkeypatch.delenv(KEY_ENV_VAR, raising=False)
    assert signing_key_from(None) is None
    monkeypatch.setenv(KEY_ENV_VAR, str(_key_file(tmp_path, TEAM)))
    assert signing_key_from(None).secret == TEAM
    assert signing_key_from(_key_file(tmp_path, OTHER, "other.key")).secret == OTHER
    monkeypatch.setenv(KEY_ENV_VAR, str(tmp_path / "missing.key"))
    with pytest.raises(InvalidInputError, match=rf"\${KEY_ENV_VAR}: signing key file .*missing.key cannot be read"):
        signing_key_from(None)


# -- the store setting (both backends) -------------------------------------------------


def test_the_setting_is_off_by_default_kept_in_the_index_and_audited(new_store):
    store = new_store("s")
    assert store.settings() == {"require_signatures": False}
    assert store.set_require_signatures(True) is True
    assert store.set_require_signatures(True) is False  # no change, no entry
    store.close()
    reopened = new_store("s", create=False)
    assert reopened.requires_signatures is True
    entries = [e for e in reopened.audit_log() if e.action == "settings-changed"]
    assert [(e.subject, e.detail["from"], e.detail["to"]) for e in entries] == [("require_signatures", "off", "on")]
    assert reopened.set_require_signatures(False) is True and reopened.requires_signatures is False
    assert reopened.verify().ok


def test_a_setting_edited_outside_kinetome_is_reported(new_store):
    store = new_store("s")
    raw_sql(store, "INSERT INTO store_info (key, value) VALUES ('require_signatures', 'maybe')")
    with pytest.raises(StoreIntegrityError, match=r"must be 'on' or 'off', got 'maybe'.*store-settings --require-signatures"):
        store.requires_signatures


# -- export and import -----------------------------------------------------------------


@pytest.fixture
def keys() -> dict[str, SigningKey]:
    return {"team": SigningKey(TEAM, "team.key"), "other": SigningKey(OTHER, "other.key")}


@pytest.fixture
def bundles(new_store, tmp_path, keys) -> dict[str, Path]:
    """The same retrained version exported unsigned, signed with the team key and signed with another key."""
    with new_store("source") as s:
        s.register("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50})
        s.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P2" * 50}, parent="reach@1",
              reason="retrained", meta={"success_after": 0.31})
        s.add_note("reach@2", "needs the soft gripper")
        return {
            "unsigned": export_bundle(s, "reach@2", tmp_path / "unsigned.tar"),
            "team": export_bundle(s, "reach@2", tmp_path / "team.tar.gz", signing_key=keys["team"]),
            "other": export_bundle(s, "reach@2", tmp_path / "other.tar", signing_key=keys["other"]),
        }


def _members(path: Path) -> list[tuple[str, bytes]]:
    with tarfile.open(path) as tar:
        return [(m.name, tar.extractfile(m).read()) for m in tar.getmembers()]


def _edited_and_resealed(path: Path, out: Path) -> Path:
    """The bundle with a better "success after" in its manifest, the seal recomputed and the archive
    canonical again: what someone without the key can do. Only a signature can tell."""
    members = []
    for name, data in _members(path):
        if name == "manifest.json":
            doc = json.loads(data)
            doc["versions"][-1]["meta"]["success_after"] = 0.99
            data = (json.dumps(doc, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode()
            manifest = data
            root = doc["root"]
        members.append((name, data))
    seal = build_seal(manifest, next(v["identity"] for v in json.loads(manifest)["versions"] if v["ref"] == root))
    members = [(n, seal if n == "seal.json" else d) for n, d in members]
    with open(out, "wb") as f:
        write_canonical_tar(f, [bytes_member(n, d) for n, d in members])
    return out


@pytest.fixture
def target(new_store):
    s = new_store("target")
    s.register("keep", {"spec.json": b"already here"})
    yield s
    s.close()


def _refused(target, path: Path, key: SigningKey | None, message: str) -> None:
    before = snapshot(target)  # every row (versions, artifacts, audit log, settings) and every blob
    with pytest.raises(SignatureError, match=message):
        import_bundle(target, path, signing_key=key)
    assert snapshot(target) == before
    assert not target._blobs.temp_files()


def test_a_signed_bundle_carries_the_key_id_and_never_the_key(bundles, keys):
    names = [n for n, _ in _members(bundles["team"])]
    assert names[:3] == ["seal.json", "signature.json", "manifest.json"]
    assert "signature.json" not in [n for n, _ in _members(bundles["unsigned"])]
    signature = json.loads(dict(_members(bundles["team"]))["signature.json"])
    assert signature["key_id"] == keys["team"].key_id and signature["algorithm"] == "hmac-sha256"
    raw = b"".join(d for _, d in _members(bundles["team"]))
    assert TEAM not in raw and TEAM.hex().encode() not in raw


def test_a_store_that_requires_signatures_refuses_what_it_cannot_verify(bundles, keys, target, tmp_path):
    target.set_require_signatures(True)
    resealed = _edited_and_resealed(bundles["team"], tmp_path / "resealed.tar")
    _refused(target, bundles["unsigned"], keys["team"], r"not signed and this store requires signed bundles")
    _refused(target, bundles["team"], None, r"signed \(key id [0-9a-f]{16}\) .* but no key was given to check it")
    _refused(target, bundles["other"], keys["team"], rf"signed with key id {keys['other'].key_id}, but the key given .* has key id {keys['team'].key_id}")
    _refused(target, bundles["team"], keys["other"], r"signed with key id .* but the key given")
    _refused(target, resealed, keys["team"], r"does not match the bundle's manifest: the manifest was changed after signing")
    report = import_bundle(target, bundles["team"], signing_key=keys["team"])
    assert report.added == ("reach@1", "reach@2") and (report.signature, report.signed_with) == ("verified", keys["team"].key_id)
    assert target.get("reach@2").meta["success_after"] == 0.31
    entries = [e for e in target.audit_log("reach") if e.action == "imported"]
    assert [e.detail["signature"] for e in entries] == [{"status": "verified", "key_id": keys["team"].key_id}] * 2


def test_without_the_requirement_a_given_key_is_still_checked(bundles, keys, target, tmp_path):
    resealed = _edited_and_resealed(bundles["team"], tmp_path / "resealed.tar")
    _refused(target, bundles["other"], keys["team"], r"signed with key id")
    _refused(target, resealed, keys["team"], r"changed after signing")
    report = import_bundle(target, bundles["team"], signing_key=keys["team"])
    assert report.signature == "verified" and report.warnings == ()


def test_without_the_requirement_and_without_a_key_a_signed_bundle_imports_with_a_note(bundles, target, tmp_path):
    # the seal alone does not stop a re-sealed edit: this is what the signature is for
    report = import_bundle(target, _edited_and_resealed(bundles["team"], tmp_path / "resealed.tar"))
    assert report.signature == "unchecked"
    assert any("the signature was not checked" in w for w in report.warnings)
    assert target.get("reach@2").meta["success_after"] == 0.99


def test_an_unsigned_bundle_with_a_key_given_imports_with_a_note(bundles, keys, target):
    report = import_bundle(target, bundles["unsigned"], signing_key=keys["team"])
    assert report.signature == "unsigned" and any("not signed" in w for w in report.warnings)


@pytest.mark.parametrize("field", ["mac", "key_id"])
def test_a_flipped_character_in_the_signature_is_refused(bundles, keys, target, tmp_path, field):
    members = []
    for name, data in _members(bundles["team"]):
        if name == "signature.json":
            doc = json.loads(data)
            doc[field] = ("1" if doc[field][0] != "1" else "2") + doc[field][1:]
            data = (json.dumps(doc, indent=1, sort_keys=True) + "\n").encode()
        members.append(bytes_member(name, data))
    path = tmp_path / "flipped.tar"
    with open(path, "wb") as f:
        write_canonical_tar(f, members)
    _refused(target, path, keys["team"], r"signed with key id|does not match the bundle's manifest")


def test_a_malformed_signature_is_refused_even_without_a_key(bundles, target, tmp_path):
    members = [bytes_member(n, b"{not json" if n == "signature.json" else d) for n, d in _members(bundles["team"])]
    path = tmp_path / "malformed.tar"
    with open(path, "wb") as f:
        write_canonical_tar(f, members)
    _refused(target, path, None, r"'signature.json' is not JSON text")
    assert issubclass(SignatureError, BundleError)


# -- the commands ----------------------------------------------------------------------


def test_the_commands_sign_check_and_refuse_with_exit_1(tmp_path, capsys, monkeypatch):
    from kinetome.library.cli.main import main
    from kinetome.library.store import Store

    monkeypatch.delenv(KEY_ENV_VAR, raising=False)
    team, other = _key_file(tmp_path, TEAM), _key_file(tmp_path, OTHER, "other.key")
    with Store(tmp_path / "source") as s:
        s.register("reach", {"spec.json": b'{"reach": 1}'})
    src, dst = ["--store", str(tmp_path / "source")], ["--store", str(tmp_path / "target")]
    assert main([*src, "export", "reach@1", "--out", str(tmp_path / "b.tar"), "--signing-key", str(team)]) == 0
    assert main([*src, "export", "reach@1", "--out", str(tmp_path / "u.tar")]) == 0
    with Store(tmp_path / "target") as t:
        t.register("keep", {"spec.json": b"here"})
    assert main([*dst, "store-settings", "--require-signatures", "on"]) == 0
    capsys.readouterr()
    assert main([*dst, "import", str(tmp_path / "u.tar"), "--signing-key", str(team)]) == 1
    assert main([*dst, "import", str(tmp_path / "b.tar"), "--signing-key", str(other)]) == 1
    monkeypatch.setenv(KEY_ENV_VAR, str(team))
    assert main([*dst, "import", str(tmp_path / "b.tar"), "--json"]) == 0
    out, err = capsys.readouterr()
    assert "not signed and this store requires" in err and "signed with key id" in err
    assert json.loads(out)["signature"] == {"status": "verified", "key_id": load_signing_key(team).key_id}
    assert TEAM.decode() not in out + err and OTHER.decode() not in out + err
    assert main([*dst, "store-settings", "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert shown["settings"] == {"require_signatures": True} and shown["changed"] is None
    assert [(c["action"], c["detail"]["to"]) for c in shown["changes"]] == [("settings-changed", "on")]
    assert main([*dst, "store-settings", "--require-signatures", "off"]) == 0
    assert "require_signatures   off  (set by " in capsys.readouterr().out


def test_copy_store_keeps_the_requirement(tmp_path):
    from kinetome.library.store import Store, copy_store

    with Store(tmp_path / "a") as a, Store(tmp_path / "b") as b:
        a.register("reach", {"spec.json": b"x"})
        a.set_require_signatures(True)
        assert copy_store(a, b).ok
        assert b.requires_signatures is True


WAVE1_BUNDLE = Path(__file__).resolve().parents[2] / "fixtures" / "wave1" / "arm-reach-tray-2.bundle.tar.gz"


def test_old_unsealed_bundles_cannot_pass_as_signed_or_skip_the_requirement(target, keys, tmp_path):
    """A format-1 bundle (made before seals) is unsigned: refused where signatures are required;
    a signature added to one is refused too."""
    target.set_require_signatures(True)
    _refused(target, WAVE1_BUNDLE, keys["team"], r"not signed and this store requires signed bundles")
    members = _members(WAVE1_BUNDLE)
    manifest = dict(members)["manifest.json"]
    from kinetome.library.store.signing import build_signature

    path = tmp_path / "old-signed.tar"
    with open(path, "wb") as f:
        write_canonical_tar(f, [bytes_member("signature.json", build_signature(manifest, keys["team"]))] + [bytes_member(n, d) for n, d in members])
    before = snapshot(target)
    with pytest.raises(BundleError, match=r"'signature.json' is not part of a format-1 bundle"):
        import_bundle(target, path, signing_key=keys["team"])
    assert snapshot(target) == before
    target.set_require_signatures(False)
    assert import_bundle(target, WAVE1_BUNDLE, signing_key=keys["team"]).signature == "unsigned"


def test_a_requirement_switched_on_during_an_import_is_honoured(bundles, target, monkeypatch):
    """The setting is read again inside the import's write transaction (another user may turn it on meanwhile)."""
    from kinetome.library.store import bundle as bundle_module

    real = bundle_module.requires_signatures
    calls = []

    def switched_on_after_the_checks(conn):
        calls.append(1)
        if len(calls) == 1:
            return False
        target._index.execute("SELECT 1")  # the transaction is open here
        return True

    monkeypatch.setattr(bundle_module, "requires_signatures", switched_on_after_the_checks)
    rows = target._index.execute("SELECT count(*) FROM versions").fetchone()[0]
    entries = len(target.audit_log())
    with pytest.raises(SignatureError, match=r"began requiring signed bundles while the bundle was being checked, and it is unsigned"):
        import_bundle(target, bundles["unsigned"])
    assert len(calls) == 2 and real(target._index) is False
    assert target._index.execute("SELECT count(*) FROM versions").fetchone()[0] == rows and len(target.audit_log()) == entries
