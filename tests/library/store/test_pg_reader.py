"""Stores opened for reading only, and the light PostgreSQL connection behind them (libpq through
ctypes, no psycopg): the same answers and errors as the full driver, parameters kept apart from
the SQL, writes refused on every backend."""

from __future__ import annotations

import re

import pytest

from kinetome.library.errors import InvalidInputError, NotFoundError, StoreIntegrityError, StoreUnavailableError
from kinetome.library.store import Store, copy_store, export_bundle, import_bundle, libpq
from kinetome.library.store.pg_index import PostgresIndex
from kinetome.library.store.pg_reader import PostgresReader, _numbered, open_reader
from kinetome.library.store.schema import SCHEMA_VERSION
from tests.store_backends import snapshot

SPEC = {"spec.json": b'{"reach": 1}', "params.safetensors": b"P" * 300}


def _fill(store: Store) -> None:
    """Versions across names with lineage, current versions, notes, artifacts and audit entries."""
    store.register("reach", SPEC, meta={"description": "Reach the tray, café ünïcode", "env": "arm"})
    store.add("reach", {**SPEC, "spec.json": b'{"reach": 2}'}, parent="reach@1", reason="retrained", meta={"variant": "heavy"})
    store.register("lift", {"spec.json": b'{"lift": 1}'}, meta={"description": "it's quoted 'text'"})
    store.promote("reach@2", task="heavy-payload", evidence={"success": 0.9})
    store.add_note("reach@1", "first note")
    store.attach_artifact("reach@2", "check-result", {"result.json": b"{}"}, task={"t": 1}, settings={"n": 3})
    store.attach_model("reach@2", "option-models", {"models.json": b"{}"}, {"episodes": 200})


def _reads(store: Store) -> dict:
    """Everything the read API answers about the filled store."""
    return {
        "list": store.list_skills(),
        "get": [store.get(r) for r in ("reach", "reach@1", "reach@2", "lift")],
        "by-task": store.get("reach", task="heavy-payload"),
        "history": store.history("reach"),
        "lineage": store.lineage("reach@2"),
        "children": store.children("reach@1"),
        "currents": store.currents("reach"),
        "current_tasks": store.current_tasks("reach@2"),
        "notes": store.notes("reach@1"),
        "artifacts": store.artifacts("reach@2", all_revisions=True),
        "file": store.read_file("reach@2", "spec.json"),
        "log": store.audit_log(),
        "settings": store.settings(),
        "verify": store.verify().ok,
        "pin": store.get(f"reach@id:{store.get('reach@2').identity[:12]}"),
    }


def test_a_read_only_store_answers_as_the_full_connection_does(new_store):
    _fill(new_store())
    reader = new_store(read_only=True)
    assert _reads(reader) == _reads(new_store())
    if reader.backend == "postgresql":
        assert isinstance(reader._index, PostgresReader)  # libpq directly, not psycopg


def test_a_read_only_store_refuses_every_change(new_store, tmp_path):
    _fill(new_store())
    reader = new_store(read_only=True)
    bundle = export_bundle(new_store(), "reach@2", tmp_path / "reach.tar")
    before = snapshot(new_store())
    changes = [
        lambda: reader.add("reach", {"spec.json": b"new"}, parent="reach@1", reason="retrained"),
        lambda: reader.register("new-skill", SPEC),
        lambda: reader.promote("reach@1"),
        lambda: reader.add_note("reach@1", "a note"),
        lambda: reader.attach_artifact("reach@1", "check-result", {"result.json": b"[]"}),
        lambda: reader.set_require_signatures(True),
        lambda: copy_store(new_store("other"), reader),
        lambda: import_bundle(reader, bundle),
    ]
    for change in changes:
        with pytest.raises(InvalidInputError, match=r"the store at .* was opened for reading only and cannot be changed; open it without read_only=True"):
            change()
    assert snapshot(new_store()) == before


def test_reading_a_missing_store(new_store, store_places):
    with pytest.raises(NotFoundError, match=r"no kinetome store at "):
        new_store("absent", create=False, read_only=True)
    if store_places.backend == "postgresql":
        with pytest.raises(InvalidInputError, match=r"creating one needs a blob location"):
            Store(store_places.location("absent"), read_only=True)


def test_read_only_with_create_still_creates_a_missing_store(new_store):
    store = new_store("fresh", read_only=True)  # as `kinetome list` on a new machine: an empty store
    assert store.list_skills() == []
    with pytest.raises(InvalidInputError, match="opened for reading only"):
        store.register("reach", SPEC)


# -- the light connection -------------------------------------------------------------------


def test_the_light_connection_loads_the_libpq_psycopg_uses():
    import psycopg

    # without a loadable libpq, list/show would quietly fall back to the slower driver
    lib = libpq.load_libpq()
    assert lib is not None
    assert lib.PQlibVersion() == psycopg.pq.version()  # the same library, so connection settings behave alike
    if psycopg.pq.__impl__ == "binary":
        assert "psycopg_binary" in lib._name


def test_without_a_loadable_libpq_the_full_driver_reads(pg_url, tmp_path, monkeypatch):
    url = pg_url()
    with Store(url, blobs=tmp_path / "b") as store:
        _fill(store)
        expected = _reads(store)
    monkeypatch.setattr(libpq, "load_libpq", lambda: None)
    with Store(url, read_only=True) as store:
        assert isinstance(store._index, PostgresIndex) and _reads(store) == expected
        with pytest.raises(InvalidInputError, match="opened for reading only"):
            store.add_note("reach@1", "x")


def _reader_with_psycopg_impl(monkeypatch, impl: str, url: str) -> Store:
    """A read-only store opened with ``$PSYCOPG_IMPL`` = ``impl`` (libpq looked up afresh)."""
    monkeypatch.setenv("PSYCOPG_IMPL", impl)
    libpq.load_libpq.cache_clear()
    try:
        return Store(url, read_only=True)
    finally:
        libpq.load_libpq.cache_clear()  # later tests look libpq up without the variable


def test_psycopg_impl_chooses_the_libpq_or_leaves_reading_to_the_full_driver(pg_url, tmp_path, monkeypatch):
    url = pg_url()
    with Store(url, blobs=tmp_path / "b") as store:
        _fill(store)
        expected = _reads(store)
    # psycopg's c and python implementations use the system's libpq: so does the light connection
    with _reader_with_psycopg_impl(monkeypatch, "python", url) as store:
        assert isinstance(store._index, PostgresReader) and _reads(store) == expected
        assert "psycopg_binary" not in store._index._conn._lib._name
    # an implementation this module does not know: which libpq it means is psycopg's business
    with _reader_with_psycopg_impl(monkeypatch, "some-future-impl", url) as store:
        assert isinstance(store._index, PostgresIndex) and _reads(store) == expected


def test_an_index_schema_this_kinetome_does_not_know_is_refused_by_either_connection(pg_url, tmp_path):
    url = pg_url()
    with Store(url, blobs=tmp_path / "b") as store:
        store._index.execute("UPDATE store_info SET value = ? WHERE key = 'schema'", (str(SCHEMA_VERSION + 1),))
    message = re.escape(f"has index schema {SCHEMA_VERSION + 1}, which this kinetome does not understand ({SCHEMA_VERSION})")
    for read_only in (False, True):
        with pytest.raises(StoreIntegrityError, match=message):
            Store(url, read_only=read_only)
    with pytest.raises(StoreIntegrityError, match=message):
        open_reader(url)


def test_a_client_encoding_other_than_utf8_goes_through_the_full_driver(pg_url, tmp_path):
    url = pg_url()
    with Store(url, blobs=tmp_path / "b") as store:
        _fill(store)
        expected = _reads(store)
    latin = url + "&client_encoding=LATIN1"
    assert open_reader(latin) is None
    with Store(latin, read_only=True) as store:
        assert isinstance(store._index, PostgresIndex)
        assert _reads(store) == expected and store.get("reach@1").meta["description"] == "Reach the tray, café ünïcode"


def test_parameters_travel_apart_from_the_sql(pg_url, tmp_path):
    url = pg_url()
    Store(url, blobs=tmp_path / "b").close()
    reader = open_reader(url)
    try:
        hostile = "x'); DROP TABLE versions; --"
        assert reader.execute("SELECT ?::text, ?::text", (hostile, "it's ünïcode")).fetchall() == [(hostile, "it's ünïcode")]
        assert reader.execute("SELECT COUNT(*) FROM versions WHERE name = ?", (hostile,)).fetchone() == (0,)
        row = reader.execute("SELECT ?::bigint, ?::numeric > 0, ?::boolean, ?::float8, ?::text IS NULL", (7, 2**70, True, 0.25, None)).fetchone()
        assert row == (7, True, True, 0.25, True)
        with pytest.raises(StoreIntegrityError, match="refused a statement: PostgreSQL text fields cannot contain NUL"):
            reader.execute("SELECT ?::text", ("a\x00b",))
        with pytest.raises(StoreIntegrityError, match=r"refused a statement: .*syntax error"):
            reader.execute("SELEC 1")
        with pytest.raises(TypeError, match="type oid 1184, which this reader does not convert"):
            reader.execute("SELECT now()")  # a type the index never returns: refused, not guessed
        assert reader.execute("SELECT 1").fetchone() == (1,)  # the connection is idle and usable again
    finally:
        reader.close()


def test_the_light_connection_reports_like_the_full_driver(pg_server, pg_url, tmp_path):
    import psycopg

    url = pg_url()
    with Store(url, blobs=tmp_path / "b") as store:
        _fill(store)
    full, light = Store(url, create=False), Store(url, read_only=True)
    try:
        for store in (full, light):
            store._index.execute("SELECT 1").fetchone()
        with pytest.raises(StoreIntegrityError) as full_error:
            full._index.execute("SELECT nothing FROM versions")
        with pytest.raises(StoreIntegrityError) as light_error:
            light._index.execute("SELECT nothing FROM versions")
        assert str(light_error.value) == str(full_error.value)
        (pid,) = light._index.execute("SELECT pg_backend_pid()").fetchone()
        with psycopg.connect(pg_server.url, autocommit=True) as admin:
            admin.execute("SELECT pg_terminate_backend(%s)", (pid,))
        with pytest.raises(StoreUnavailableError, match=r"the store at postgresql://.* stopped answering"):
            light.list_skills()
    finally:
        full.close()
        light.close()


@pytest.mark.parametrize("read_only", [False, True])
def test_no_server_at_the_address_either_way(read_only, tmp_path):
    with pytest.raises(
        StoreUnavailableError,
        match=r"cannot connect to the store at postgresql://127.0.0.1:1/nothing: connection failed: connection to server at \"127.0.0.1\", port 1 failed",
    ):
        Store("postgresql://127.0.0.1:1/nothing", blobs=tmp_path, read_only=read_only)


def test_placeholders_are_numbered_in_order():
    assert _numbered("SELECT a FROM t WHERE b = ? AND c IN (?, ?)") == "SELECT a FROM t WHERE b = $1 AND c IN ($2, $3)"
    assert _numbered("SELECT 1") == "SELECT 1"
