"""Fixtures that run one store test on every index backend: ``new_store(name)`` opens the same
store for the same name, on SQLite (a folder) or on PostgreSQL (a fresh schema on a real server
plus a blob folder). Import the fixtures into a conftest: ``from tests.store_backends import *``.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from tests.pg_server import PgServer, find_bin_dir, server_from_env, start_server, stop_server

__all__ = [
    "BACKENDS", "pg_server", "pg_url", "s3_server", "s3_blobs", "backend", "store_places", "new_store", "StorePlaces", "snapshot", "raw_sql",
]

BACKENDS = ("sqlite", "postgresql")


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    """$KINETOME_TEST_PG (CI starts one), else a private server started for this session."""
    found = server_from_env()
    if found is not None:
        yield found
        return
    if find_bin_dir() is None:
        pytest.skip("PostgreSQL is not installed here (no initdb); install it with: apt-get install postgresql")
    base = Path(tempfile.mkdtemp(prefix="kinetome-pg-"))
    base.chmod(0o755)  # the server runs as the postgres user when tests run as root
    server = start_server(base)
    previous = os.environ.get("PGPASSFILE")
    os.environ["PGPASSFILE"] = str(server.passfile)  # subprocess workers find the password the same way
    try:
        yield server
    finally:
        stop_server(server.data_dir)
        if previous is None:
            os.environ.pop("PGPASSFILE", None)
        else:
            os.environ["PGPASSFILE"] = previous
        shutil.rmtree(base, ignore_errors=True)


@pytest.fixture
def pg_url(pg_server) -> Iterator[Callable[[], str]]:
    """Makes URLs of fresh, empty stores: each a schema of its own on the test server."""
    import psycopg

    made: list[str] = []

    def fresh() -> str:
        schema = f"t_{uuid.uuid4().hex[:16]}"
        with psycopg.connect(pg_server.url, autocommit=True) as conn:
            conn.execute(f"CREATE SCHEMA {schema}")
        made.append(schema)
        return f"{pg_server.url}?options=-csearch_path%3D{schema}"

    yield fresh
    with psycopg.connect(pg_server.url, autocommit=True) as conn:
        for schema in made:
            conn.execute(f"DROP SCHEMA IF EXISTS {schema} CASCADE")


class StorePlaces:
    """Where the store called ``name`` lives in this test: (location, blobs) for ``Store``."""

    def __init__(self, backend: str, tmp_path: Path, fresh_url: Callable[[], str] | None):
        self.backend = backend
        self._tmp = tmp_path
        self._fresh_url = fresh_url
        self._urls: dict[str, str] = {}

    def location(self, name: str = "store") -> str | Path:
        if self.backend == "sqlite":
            return self._tmp / name
        if name not in self._urls:
            self._urls[name] = self._fresh_url()
        return self._urls[name]

    def blobs(self, name: str = "store") -> Path | None:
        return None if self.backend == "sqlite" else self._tmp / name

    def args(self, name: str = "store") -> list[str]:
        """``location blobs`` as two command-line words (``-`` for no blob location)."""
        blobs = self.blobs(name)
        return [str(self.location(name)), "-" if blobs is None else str(blobs)]


@pytest.fixture(params=BACKENDS)
def backend(request) -> str:
    return request.param


@pytest.fixture
def store_places(backend, tmp_path, request) -> StorePlaces:
    fresh = request.getfixturevalue("pg_url") if backend == "postgresql" else None
    return StorePlaces(backend, tmp_path, fresh)


@pytest.fixture
def new_store(store_places) -> Iterator[Callable[..., Any]]:
    """``new_store(name="store", create=True, read_only=False)``: open the store called ``name`` on this test's backend."""
    from kinetome.library.store import Store

    opened: list[Store] = []

    def open_store(name: str = "store", *, create: bool = True, read_only: bool = False) -> Store:
        store = Store(store_places.location(name), blobs=store_places.blobs(name), create=create, read_only=read_only)
        opened.append(store)
        return store

    yield open_store
    for store in opened:
        store.close()


def raw_sql(store: Any, sql: str, params: tuple = ()) -> None:
    """Change the index behind kinetome's back (``?`` placeholders), as a damaged or edited index would."""
    with store._index.write_transaction() as conn:
        conn.execute(sql, params)


_TABLES = ("store_info", "blobs", "versions", "version_files", "notes", "currents", "artifacts", "artifact_files", "audit_log")


def snapshot(store: Any) -> tuple:
    """Everything a store holds: every row of every index table and every file (bytes) under its blob folder."""
    rows = {t: sorted(map(repr, store._index.execute(f"SELECT * FROM {t}").fetchall())) for t in _TABLES}
    root = Path(store.blobs_location)
    files = sorted(
        (str(p.relative_to(root)), hashlib.sha256(p.read_bytes()).hexdigest())
        for p in root.rglob("*")
        if p.is_file() and not p.name.startswith("index.sqlite")
    )
    dirs = sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_dir())
    return rows, files, dirs


@pytest.fixture(scope="session")
def s3_server() -> Iterator[str]:
    """An S3 emulator (moto's server, from the package registry) on 127.0.0.1; yields its endpoint.
    It stands in for S3-compatible object storage: not a real S3 service."""
    pytest.importorskip("s3fs", reason="the S3 blob tests need s3fs: pip install -e '.[test]'")
    moto_server = pytest.importorskip("moto.server", reason="the S3 blob tests need moto's emulator: pip install -e '.[test]'")
    import logging
    import socket

    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    server = moto_server.ThreadedMotoServer(ip_address="127.0.0.1", port=port, verbose=False)
    server.start()
    settings = {
        "AWS_ACCESS_KEY_ID": "emulator", "AWS_SECRET_ACCESS_KEY": "emulator", "AWS_DEFAULT_REGION": "us-east-1",
        "AWS_ENDPOINT_URL_S3": f"http://127.0.0.1:{port}",
    }
    previous = {k: os.environ.get(k) for k in settings}
    os.environ.update(settings)  # subprocesses reach the emulator the way a user reaches S3
    try:
        yield settings["AWS_ENDPOINT_URL_S3"]
    finally:
        server.stop()
        for k, v in previous.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


@pytest.fixture
def s3_blobs(s3_server) -> Callable[[], str]:
    """Makes fresh ``s3://bucket/prefix`` blob locations on the emulator."""
    import fsspec

    fs = fsspec.filesystem("s3", use_listings_cache=False, skip_instance_cache=True)

    def fresh() -> str:
        bucket = f"kinetome-{uuid.uuid4().hex[:12]}"
        fs.mkdir(bucket)
        return f"s3://{bucket}/team"

    return fresh
