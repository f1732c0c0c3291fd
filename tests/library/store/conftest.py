"""Store tests that take ``new_store`` run once per index backend (SQLite, PostgreSQL)."""

from tests.store_backends import backend, new_store, pg_server, pg_url, s3_blobs, s3_server, store_places  # noqa: F401
