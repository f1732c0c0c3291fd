"""Store basics: add/get/list/history/lineage/notes/models, identical re-adds, and error messages."""

from __future__ import annotations

import dataclasses
import json
import sqlite3
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError, NotFoundError, StoreIntegrityError
from kinetome.library.store import STORE_ENV_VAR, Store, parse_ref, resolve_store_root

SPEC = b'{"name": "reach"}'
PARAMS = b"\x00\x01" * 64


@pytest.fixture
def store(new_store):
    return new_store()


def _utc(text: str) -> datetime:
    assert text.endswith("Z"), text
    return datetime.fromisoformat(text[:-1] + "+00:00")


# -- versions --------------------------------------------------------------------------


def test_add_get_and_identical_readd(store):
    first = store.add("reach", {"spec.json": SPEC, "params.safetensors": PARAMS}, meta={"description": "reach a point", "env": "kinetome/Arm2-v0", "seed": 3})
    assert first.created
    v = first.version
    assert (v.ref, v.name, v.number, v.parent, v.reason) == ("reach@1", "reach", 1, None, "registered")
    assert v.roles == ("params.safetensors", "spec.json")
    assert v.meta == {"description": "reach a point", "env": "kinetome/Arm2-v0", "seed": 3}
    assert _utc(v.created_at).tzinfo == timezone.utc
    assert store.get("reach") == v == store.get("reach@1")
    assert store.read_file(v, "spec.json") == SPEC and store.read_file("reach@1", "params.safetensors") == PARAMS

    again = store.add("reach", {"params.safetensors": PARAMS, "spec.json": SPEC}, meta={"other": True})
    assert not again.created and again.version == v  # meta of a re-add is ignored: content decides
    assert [x.number for x in store.history("reach")] == [1]

    # same bytes under another role, or under another name, are new versions
    assert store.add("reach", {"spec.json": SPEC, "weights.safetensors": PARAMS}).version.ref == "reach@2"
    assert store.add("reach-copy", {"spec.json": SPEC, "params.safetensors": PARAMS}).version.ref == "reach-copy@1"
    assert store.get("reach").ref == "reach@2"


def test_records_are_immutable(store):
    v = store.add("reach", {"spec.json": SPEC}, meta={"tags": ["a"]}).version
    with pytest.raises(dataclasses.FrozenInstanceError):
        v.number = 7  # type: ignore[misc]
    v.meta["tags"].append("b")  # a fresh dict each time
    assert v.meta == {"tags": ["a"]}
    assert hash(v) == hash(store.get("reach@1"))


def test_list_history_lineage_children(store):
    store.add("reach", {"spec.json": b"1"}, meta={"description": "old", "env": "kinetome/Arm2-v0"})
    store.add("reach", {"spec.json": b"2"}, parent="reach@1", reason="retrained", meta={"description": "new", "env": "kinetome/Arm2-v0"})
    store.add("lift", {"spec.json": b"3"}, parent="reach", reason="retrained")  # bare parent = latest
    store.add("lift", {"spec.json": b"4"}, parent="lift@1", reason="retrained")
    store.add("walk", {"spec.json": b"5"}, meta={"description": 7})

    summaries = store.list_skills()
    assert [(s.name, s.latest_ref, s.count) for s in summaries] == [("lift", "lift@2", 2), ("reach", "reach@2", 2), ("walk", "walk@1", 1)]
    reach = summaries[1]
    assert (reach.description, reach.env) == ("new", "kinetome/Arm2-v0")
    assert reach.latest_created_at == store.get("reach@2").created_at
    assert summaries[2].description is None  # a non-text description is not shown as one
    store.add("reach", {"spec.json": b"6"}, parent="reach@2", reason="retrained", meta={"seed": 4})
    reach = store.list_skills()[1]
    assert (reach.latest_ref, reach.description, reach.env) == ("reach@3", "new", "kinetome/Arm2-v0")  # from reach@2

    assert [v.ref for v in store.history("reach")] == ["reach@1", "reach@2", "reach@3"]
    assert [v.ref for v in store.history("reach@1")] == ["reach@1", "reach@2", "reach@3"]
    assert [v.ref for v in store.lineage("lift@2")] == ["lift@2", "lift@1", "reach@2", "reach@1"]
    assert [v.ref for v in store.lineage("reach@1")] == ["reach@1"]
    assert store.get("lift@1").parent == "reach@2"
    assert [v.ref for v in store.children("reach@2")] == ["lift@1", "reach@3"]
    assert [v.ref for v in store.children("reach@1")] == ["reach@2"]
    assert store.children("lift@2") == []


def test_store_reopens_with_the_same_content(new_store):
    with new_store("s") as s:
        v = s.add("reach", {"spec.json": SPEC}).version
    with new_store("s", create=False) as s:
        assert s.get("reach") == v and s.read_file(v, "spec.json") == SPEC


# -- notes and models ------------------------------------------------------------------


def test_notes_append_without_changing_the_version(store):
    v = store.add("reach", {"spec.json": SPEC}).version
    n1 = store.add_note("reach@1", "works on the light payload")
    n2 = store.add_note("reach", "fails above 2 kg")
    assert [(n.index, n.text, n.version) for n in store.notes("reach@1")] == [
        (1, "works on the light payload", "reach@1"),
        (2, "fails above 2 kg", "reach@1"),
    ]
    assert _utc(n1.created_at) <= _utc(n2.created_at)
    assert store.get("reach@1") == v
    assert store.add("reach", {"spec.json": SPEC}).created is False


def test_models_have_revisions_per_kind(store):
    store.add("reach", {"spec.json": SPEC})
    d1 = store.attach_model("reach@1", "duration", {"table.bin": b"d1"}, {"held_out_error": 0.2})
    d2 = store.attach_model("reach@1", "duration", {"table.bin": b"d2"}, {"held_out_error": 0.1})
    r1 = store.attach_model("reach", "reward", {"w.bin": b"r1", "x.bin": b"r1x"})
    assert (d1.ref, d2.ref, r1.ref) == ("reach@1/duration#1", "reach@1/duration#2", "reach@1/reward#1")
    assert store.attach_model("reach@1", "duration", {"table.bin": b"d2"}) == d2  # same as latest: no new revision
    assert store.attach_model("reach@1", "duration", {"table.bin": b"d1"}).revision == 3  # back to old content: new
    assert [m.ref for m in store.models("reach@1")] == ["reach@1/duration#3", "reach@1/reward#1"]
    assert [m.ref for m in store.models("reach@1", all_revisions=True)] == [
        "reach@1/duration#1", "reach@1/duration#2", "reach@1/duration#3", "reach@1/reward#1",
    ]
    assert store.get_model("reach@1", "duration", revision=2).meta == {"held_out_error": 0.1}
    assert store.get_model("reach@1", "duration").revision == 3
    assert store.read_model(r1, "x.bin") == b"r1x"
    assert store.read_model(store.get_model("reach@1", "duration", revision=2), "table.bin") == b"d2"
    assert store.get("reach@1").files == store.add("reach", {"spec.json": SPEC}).version.files
    with pytest.raises(NotFoundError, match=r"reach@1 has no 'end_state' artifact; attached kinds: duration, reward"):
        store.get_model("reach@1", "end_state")
    with pytest.raises(NotFoundError, match=r"reach@1/duration#9 does not exist; duration has revisions 1-3"):
        store.get_model("reach@1", "duration", revision=9)
    with pytest.raises(NotFoundError, match=r"reach@1/reward#1 has no file with role 'y.bin'; its files are: w.bin, x.bin"):
        store.read_model(r1, "y.bin")


# -- refs, names and errors ------------------------------------------------------------


@pytest.mark.parametrize(
    "ref, expected",
    [("reach", ("reach", None)), ("reach@3", ("reach", 3)), ("a_b-c9@12", ("a_b-c9", 12)), ("0x@1", ("0x", 1))],
)
def test_parse_ref(ref, expected):
    assert parse_ref(ref) == expected


@pytest.mark.parametrize(
    "ref, message",
    [
        ("Reach", r"skill name in ref 'Reach' must match \[a-z0-9\]\[a-z0-9_-\]\{0,63\}.*got 'Reach'; use e.g. 'reach'"),
        ("reach@0", r"version number in ref 'reach@0' must be a whole number >= 1.*got '0'.*'reach@1'"),
        ("reach@", r"must be a whole number >= 1.*got ''"),
        ("reach@01", r"without leading zeros, got '01'"),
        ("reach@x", r"got 'x'"),
        ("reach@1@2", r"got '1@2'"),
        ("reach@-1", r"got '-1'"),
        ("", r"skill name in ref '' must match"),
        ("-reach", r"got '-reach'"),
        ("a" * 65, r"at most 64 characters"),
        ("reach arm", r"got 'reach arm'; use e.g. 'reach-arm'"),
        (3, r"version ref must be a string NAME or NAME@N, got int 3"),
    ],
)
def test_bad_refs_are_refused_clearly(store, ref, message):
    with pytest.raises(InvalidInputError, match=message):
        store.get(ref)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"name": "Reach"}, r"skill name must match .* got 'Reach'; use e.g. 'reach'"),
        ({"name": "reach/x"}, r"got 'reach/x'; use e.g. 'reach-x'"),
        ({"name": "_x"}, r"starting with a letter or digit"),
        ({"files": {}}, r"files must be a non-empty dict of role -> bytes"),
        ({"files": {"../spec.json": b"x"}}, r"file role must match .* got '../spec.json'"),
        ({"files": {"a/b": b"x"}}, r"no '/'"),
        ({"files": {"spec.json": "text"}}, r"files\['spec.json'\] must be bytes, got str"),
        ({"reason": "copied"}, r"reason must be one of registered, revised, retrained, initiation-learned, got 'copied'"),
        ({"reason": "retrained"}, r"a retrained version needs its parent, got parent=None"),
        ({"meta": ["a"]}, r"meta must be a dict \(a JSON object\), got list"),
        ({"meta": {"x": float("nan")}}, r"meta\['x'\] is nan; store non-finite numbers as null"),
        ({"meta": {"m": {"k": object()}}}, r"meta\['m'\]\['k'\] is a object; use str, int"),
        ({"meta": {1: "a"}}, r"meta has a key 1 of type int; keys must be strings"),
        ({"parent": "reach@x"}, r"version number in ref 'reach@x'"),
    ],
)
def test_bad_add_arguments_are_refused_clearly(store, kwargs, message):
    args = {"name": "reach", "files": {"spec.json": SPEC}, **kwargs}
    with pytest.raises(InvalidInputError, match=message):
        store.add(args.pop("name"), args.pop("files"), **args)
    assert store.list_skills() == []


def test_missing_parent_is_not_found_and_writes_nothing(store):
    store.add("reach", {"spec.json": SPEC})
    with pytest.raises(NotFoundError, match=r"reach@4 does not exist; reach has versions 1 \(latest reach@1\)"):
        store.add("lift", {"spec.json": b"new bytes"}, parent="reach@4", reason="retrained")
    assert [s.name for s in store.list_skills()] == ["reach"]
    assert store.verify().orphans == ()  # the parent is checked before any blob is written


@pytest.mark.parametrize(
    "ref, message",
    [
        ("reach@3", r"reach@3 does not exist; reach has versions 1-2 \(latest reach@2\)"),
        ("raech", r"no skill named 'raech' in the store at .*; did you mean 'reach'\?"),
        ("zzzz", r"no skill named 'zzzz' .*the store holds 2 other skill\(s\); run `kinetome list`"),
    ],
)
def test_not_found_messages(store, ref, message):
    store.add("reach", {"spec.json": b"1"})
    store.add("reach", {"spec.json": b"2"})
    store.add("lift", {"spec.json": b"3"})
    for call in (store.get, store.lineage, store.children, store.notes, store.models):
        with pytest.raises(NotFoundError, match=message):
            call(ref)
    assert not store.exists(ref)


def test_not_found_in_empty_store_and_history(store):
    with pytest.raises(NotFoundError, match=r"the store is empty; register a skill first"):
        store.get("reach")
    with pytest.raises(NotFoundError, match=r"no skill named 'reach'"):
        store.history("reach")


def test_missing_role_lists_the_roles(store):
    v = store.add("reach", {"spec.json": SPEC, "params.safetensors": PARAMS}).version
    with pytest.raises(NotFoundError, match=r"reach@1 has no file with role 'x.json'; its files are: params.safetensors, spec.json"):
        store.read_file(v, "x.json")


@pytest.mark.parametrize(
    "text, message",
    [("", r"note text must be a non-empty string"), ("   ", r"non-empty"), (None, r"non-empty"), ("x" * 70000, r"at most 65536 characters, got 70000")],
)
def test_bad_notes_are_refused(store, text, message):
    store.add("reach", {"spec.json": SPEC})
    with pytest.raises(InvalidInputError, match=message):
        store.add_note("reach@1", text)
    assert store.notes("reach@1") == []


@pytest.mark.parametrize(
    "kind, files, message",
    [
        ("Duration", {"t.bin": b"x"}, r"model kind must match .* got 'Duration'"),
        ("duration", {}, r"artifact files must be a non-empty dict"),
        ("duration", {"t.bin": 3}, r"artifact files\['t.bin'\] must be bytes, got int"),
    ],
)
def test_bad_model_arguments(store, kind, files, message):
    store.add("reach", {"spec.json": SPEC})
    with pytest.raises(InvalidInputError, match=message):
        store.attach_model("reach@1", kind, files)
    assert store.models("reach@1", all_revisions=True) == []


# -- opening a store -------------------------------------------------------------------


def test_open_errors(tmp_path):
    with pytest.raises(NotFoundError, match=r"no kinetome store at .*index.sqlite is missing"):
        Store(tmp_path / "nothing", create=False)
    assert not (tmp_path / "nothing").exists()
    (tmp_path / "file").write_text("x")
    with pytest.raises(InvalidInputError, match=r"store root must be a folder, got the file"):
        Store(tmp_path / "file")
    (tmp_path / "junk").mkdir()
    (tmp_path / "junk" / "index.sqlite").write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(StoreIntegrityError, match=r"is not a readable SQLite index"):
        Store(tmp_path / "junk")
    (tmp_path / "empty").mkdir()
    sqlite3.connect(tmp_path / "empty" / "index.sqlite").close()
    with pytest.raises(StoreIntegrityError, match=r"has no kinetome tables"):
        Store(tmp_path / "empty", create=False)
    Store(tmp_path / "newer").close()
    conn = sqlite3.connect(tmp_path / "newer" / "index.sqlite")
    conn.execute("PRAGMA user_version = 99")
    conn.close()
    with pytest.raises(StoreIntegrityError, match=r"has index schema 99, newer than this kinetome understands \(3\); upgrade"):
        Store(tmp_path / "newer")


def test_resolve_store_root_precedence(tmp_path, monkeypatch):
    import platformdirs

    monkeypatch.setenv(STORE_ENV_VAR, str(tmp_path / "env"))
    assert resolve_store_root(str(tmp_path / "cli")) == tmp_path / "cli"
    assert resolve_store_root(None) == tmp_path / "env"
    monkeypatch.delenv(STORE_ENV_VAR)
    assert resolve_store_root(None) == Path(platformdirs.user_data_dir("kinetome")) / "store"
    with pytest.raises(InvalidInputError, match=r"--store must be a folder path or a postgresql:// URL, got ''"):
        resolve_store_root("")


def test_store_reads_do_not_import_heavy_libraries(new_store, store_places):
    with new_store("s") as s:
        s.add("reach", {"spec.json": SPEC})
    blobs = store_places.blobs("s")
    code = (
        "import sys, json\n"
        "from kinetome.library.store import Store\n"
        f"s = Store({str(store_places.location('s'))!r}, blobs={None if blobs is None else str(blobs)!r}, create=False)\n"
        "s.list_skills(); s.history('reach'); s.get('reach'); s.lineage('reach'); s.verify()\n"
        "heavy = ('torch', 'mujoco', 'z3', 'numpy', 'gymnasium', 'fsspec', 's3fs', 'botocore', 'aiobotocore')\n"
        "print(json.dumps([sorted(m for m in heavy if m in sys.modules), 'psycopg' in sys.modules]))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    # the database driver loads only for a store on a server
    assert json.loads(out) == [[], store_places.backend == "postgresql"]
