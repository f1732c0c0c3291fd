"""Blobs in object storage through fsspec: ``s3://bucket/prefix`` holds ``blobs/<aa>/<sha256>``.

An object store writes an object whole or not at all, so there is no temp-and-rename: a blob
is uploaded before the index row that names it, and a killed upload leaves nothing at its key.
Credentials and the endpoint come from the client's usual settings (for S3: ``AWS_ACCESS_KEY_ID``,
``AWS_SECRET_ACCESS_KEY``, ``AWS_ENDPOINT_URL_S3`` for S3-compatible servers, or ~/.aws).
Imported only for such locations (fsspec plus its ``s3fs`` client).
"""

from __future__ import annotations

import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import TypeVar

from kinetome.library.errors import InvalidInputError, KinetomeError, StoreUnavailableError
from kinetome.library.store.blobs import BlobStore, sha256_bytes
from kinetome.library.store.records import is_digest

__all__ = ["ObjectBlobs"]

_T = TypeVar("_T")


class ObjectBlobs(BlobStore):
    """Blobs under a prefix of an fsspec file system reached by URL (``s3://bucket/prefix``)."""

    def __init__(self, url: str):
        self.location = url.rstrip("/")
        self.protocol, _, rest = self.location.partition("://")
        self.base = rest.strip("/")
        if not self.base:
            raise InvalidInputError(f"--blobs must name a bucket, got {url!r}; e.g. s3://team-bucket/kinetome")
        try:
            import fsspec

            # a fresh client: it reads the endpoint and credentials from the environment now
            self.fs = fsspec.filesystem(self.protocol, use_listings_cache=False, skip_instance_cache=True)
        except (ImportError, ValueError) as e:
            raise InvalidInputError(
                f"blobs at {url} need fsspec with {self.protocol}:// support, got: {e}; install it with: pip install 'kinetome[team]'"
            ) from None

    def _key(self, digest: str) -> str:
        return f"{self.base}/blobs/{digest[:2]}/{digest}"

    def _call(self, what: str, action: Callable[[], _T], *, missing_ok: bool = False) -> _T:
        """Run one storage call; a missing object (where ``missing_ok``) raises FileNotFoundError,
        anything else becomes one clean StoreUnavailableError."""
        try:
            return action()
        except KinetomeError:
            raise
        except Exception as e:  # the client's own errors (network, credentials, permissions, no bucket)
            if missing_ok and isinstance(e, FileNotFoundError):
                raise
            raise StoreUnavailableError(
                f"{what} at {self.location} failed: {type(e).__name__}: {str(e).splitlines()[0] if str(e) else ''}; "
                "check the endpoint, the bucket and the credentials (AWS_ACCESS_KEY_ID, AWS_ENDPOINT_URL_S3, ~/.aws)"
            ) from None

    def create(self) -> None:
        """Nothing to make: the bucket must exist (``put`` names it if it does not)."""

    def where(self, digest: str) -> str:
        return f"{self.protocol}://{self._key(digest)}"

    def read_raw(self, digest: str) -> bytes | None:
        try:
            return self._call(f"reading blob {digest}", lambda: self.fs.cat_file(self._key(digest)), missing_ok=True)
        except FileNotFoundError:
            return None

    def hash_stored(self, digest: str) -> tuple[str, int] | None:
        data = self.read_raw(digest)
        return None if data is None else (sha256_bytes(data), len(data))

    def _intact(self, digest: str) -> bool:
        found = self.hash_stored(digest)
        return found is not None and found[0] == digest

    def put(self, data: bytes) -> str:
        digest = sha256_bytes(data)
        if not self._intact(digest):
            self._call(f"writing blob {digest}", lambda: self.fs.pipe_file(self._key(digest), data))
        return digest

    def adopt(self, staged: Path, digest: str) -> None:
        if not self._intact(digest):
            self._call(f"writing blob {digest}", lambda: self.fs.put_file(str(staged), self._key(digest)))
        staged.unlink(missing_ok=True)

    def strays(self, expected: set[str]) -> list[str]:
        root = f"{self.base}/blobs"
        try:
            keys = self._call("listing blobs", lambda: self.fs.find(root), missing_ok=True)
        except FileNotFoundError:
            return []
        out = []
        for key in sorted(keys):
            name = key.rsplit("/", 1)[-1]
            if not (is_digest(name) and name in expected and key == self._key(name)):
                out.append(f"{self.protocol}://{key}")
        return out

    def temp_files(self) -> list[str]:
        return []  # an upload is one request: nothing half-written is ever visible

    def staging_dir(self) -> Path:
        folder = Path(tempfile.gettempdir()) / "kinetome-staging"
        folder.mkdir(exist_ok=True)
        return folder
