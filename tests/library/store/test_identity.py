"""Content identity: portable across stores, kept by import, pinnable, and checked by verify."""

from __future__ import annotations


import pytest

from kinetome.library.errors import BundleError, InvalidInputError, NotFoundError
from kinetome.library.store import Store, export_bundle, import_bundle, version_identity

from tests.store_backends import raw_sql, snapshot


def _fill(store: Store) -> None:
    store.register("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P1" * 50})
    store.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P2" * 50}, parent="reach@1", reason="retrained")
    store.add("reach", {"spec.json": b'{"reach": 1}', "params.safetensors": b"P3" * 50}, parent="reach@1", reason="retrained")
    store.attach_model("reach@3", "option-models", {"models.json": b"{}"})
    store.add_note("reach@3", "best on the heavy payload")


@pytest.fixture
def source(new_store):
    s = new_store("source")
    _fill(s)
    yield s
    s.close()


@pytest.fixture
def empty(new_store):
    s = new_store("empty")
    yield s
    s.close()


def test_identity_covers_files_and_lineage(source, new_store):
    one, two, three = (source.get(f"reach@{n}") for n in (1, 2, 3))
    assert all(len(v.identity) == 64 and int(v.identity, 16) >= 0 for v in (one, two, three))
    assert len({one.identity, two.identity, three.identity}) == 3
    assert two.parent_identity == one.identity
    assert one.identity == version_identity("reach", one.digests, parent_identity=None, reason="registered")
    assert three.identity == version_identity("reach", three.digests, parent_identity=one.identity, reason="retrained")
    # another store with the same content and lineage gives the same identities
    with new_store("again") as again:
        _fill(again)
        assert [again.get(f"reach@{n}").identity for n in (1, 2, 3)] == [one.identity, two.identity, three.identity]
    # the same files with another parent or reason are another version
    assert version_identity("reach", three.digests, parent_identity=None, reason="registered") != three.identity
    assert version_identity("reach", three.digests, parent_identity=one.identity, reason="revised") != three.identity


def test_pin_by_identity(source):
    three = source.get("reach@3")
    assert source.get(f"reach@id:{three.identity}") == three
    assert source.get(f"reach@id:{three.identity[:12]}") == three
    with pytest.raises(InvalidInputError, match=r"identity prefix .* must be 12 to 64 lowercase hex"):
        source.get(f"reach@id:{three.identity[:6]}")
    with pytest.raises(NotFoundError, match=r"no version of reach has identity 000000000000"):
        source.get("reach@id:000000000000")
    with pytest.raises(NotFoundError, match=r"no version of carry has identity"):
        source.get(f"carry@id:{three.identity[:12]}")


def test_import_keeps_numbers_identity_and_origin(source, empty, tmp_path):
    path = export_bundle(source, "reach@3", tmp_path / "reach.tar")
    report = import_bundle(empty, path)
    assert [v.ref for v in report.versions] == ["reach@1", "reach@3"]  # not renumbered to @2
    for v in report.versions:
        original = source.get(v.ref)
        assert v.identity == original.identity and v.reason == original.reason and v.parent == original.parent
        assert v.origin["ref"] == original.ref and v.origin["store"] == source.store_id
    assert report.added == ("reach@1", "reach@3")
    assert empty.get("reach@3").parent == "reach@1"
    assert [m.ref for m in empty.models("reach@3")] == ["reach@3/option-models#1"]
    assert [n.text for n in empty.notes("reach@3")] == ["best on the heavy payload"]
    assert empty.verify().ok
    # a later local version gets the next number after the highest one
    assert empty.add("reach", {"spec.json": b"local"}).version.ref == "reach@4"


def test_origin_survives_a_second_hop(source, empty, new_store, tmp_path):
    import_bundle(empty, export_bundle(source, "reach@3", tmp_path / "a.tar"))
    with new_store("third") as third:
        import_bundle(third, export_bundle(empty, "reach@3", tmp_path / "b.tar"))
        assert third.get("reach@3").origin["store"] == source.store_id


def test_importing_the_same_bundle_twice_is_a_no_op(source, empty, tmp_path):
    path = export_bundle(source, "reach@3", tmp_path / "reach.tar")
    first = import_bundle(empty, path)
    before = snapshot(empty)
    second = import_bundle(empty, path)
    assert second.versions == first.versions and second.added == ()
    assert snapshot(empty) == before
    # importing into the store it came from is a no-op as well
    before = snapshot(source)
    assert import_bundle(source, path).added == ()
    assert snapshot(source) == before


def test_conflicting_version_is_refused_and_changes_nothing(source, empty, tmp_path):
    path = export_bundle(source, "reach@3", tmp_path / "reach.tar")
    empty.register("reach", {"spec.json": b"someone else's reach"})
    before = snapshot(empty)
    local = empty.get("reach@1").identity
    with pytest.raises(BundleError, match=rf"reach@1 in the bundle \(identity {source.get('reach@1').identity[:12]}\) conflicts with reach@1 here \(identity {local[:12]}\)"):
        import_bundle(empty, path)
    assert snapshot(empty) == before


def test_renumbered_import_keeps_the_original_ref_as_origin(source, empty, tmp_path):
    path = export_bundle(source, "reach@3", tmp_path / "reach.tar")
    empty.register("reach", {"spec.json": b"someone else's reach"})
    report = import_bundle(empty, path, renumber=True)
    assert [v.ref for v in report.versions] == ["reach@2", "reach@3"]
    assert [v.origin["ref"] for v in report.versions] == ["reach@1", "reach@3"]
    three = source.get("reach@3")
    assert empty.get(f"reach@id:{three.identity[:16]}").ref == "reach@3"
    assert empty.get("reach@3").identity == three.identity


@pytest.mark.parametrize(
    "sql, params",
    [
        ("UPDATE version_files SET digest = (SELECT digest FROM version_files WHERE role = 'params.safetensors' AND version_id = 1)"
         " WHERE role = 'params.safetensors' AND version_id = 3", ()),
        ("UPDATE versions SET reason = 'registered' WHERE number = 3", ()),
        ("UPDATE versions SET parent_id = NULL, parent_identity = NULL WHERE number = 3", ()),
        ("UPDATE versions SET name = 'other' WHERE number = 3", ()),
    ],
    ids=["swapped-file", "reason", "parent", "name"],
)
def test_verify_flags_an_index_row_that_no_longer_matches_its_identity(source, sql, params):
    assert source.verify().ok
    raw_sql(source, sql, params)
    report = source.verify()
    assert not report.ok
    assert any("identity" in p and "@3" in p for p in report.index_problems), report.index_problems


def test_show_prints_the_identity(tmp_path, capsys):
    from pathlib import Path

    from kinetome.library.api import open_store, register
    from kinetome.library.cli.main import main

    spec = Path(__file__).resolve().parents[3] / "configs" / "skills" / "arm-reach-tray.yaml"
    with open_store(tmp_path / "s") as store:
        identity = register(spec, store=store).version.identity
    assert main(["--store", str(tmp_path / "s"), "show", "arm-reach-tray@1"]) == 0
    out = capsys.readouterr().out
    assert f"identity     {identity}" in out and "current for  nominal" in out
