"""Bundle signatures: HMAC-SHA256 with a key the team shares, over a bundle's manifest bytes.

The manifest already covers every byte import trusts (by digest), so a MAC over it covers the
whole bundle. The signature member names the key only by its key id (never the key). Import
checks it with ``hmac.compare_digest``; a store can require signed bundles (``settings.py``).
Standard library only.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import stat
from dataclasses import dataclass, field
from pathlib import Path

from kinetome.library.errors import InvalidInputError, SignatureError

__all__ = [
    "SIGNATURE_NAME",
    "SIGNATURE_FORMAT",
    "KEY_ENV_VAR",
    "MIN_KEY_BYTES",
    "SigningKey",
    "SignatureCheck",
    "hmac_sha256",
    "load_signing_key",
    "signing_key_from",
    "build_signature",
    "check_signature",
]

SIGNATURE_NAME = "signature.json"
SIGNATURE_FORMAT = "kinetome-bundle-signature"
ALGORITHM = "hmac-sha256"
KEY_ENV_VAR = "KINETOME_SIGNING_KEY_FILE"
# RFC 2104 section 3: keys shorter than the hash output (32 bytes for SHA-256) weaken the MAC
MIN_KEY_BYTES = 32
_KEY_ID_MESSAGE = b"kinetome signing key id"  # never a manifest (those are JSON objects)
_KEY_HOW = "give the team's key file with --signing-key FILE or $" + KEY_ENV_VAR
_MAKE_KEY = "make one with: python -c 'import secrets; print(secrets.token_hex(32))' > team.key && chmod 600 team.key"


def hmac_sha256(key: bytes, message: bytes) -> str:
    """HMAC-SHA256 (RFC 2104) of ``message`` under ``key``, as lowercase hex."""
    return hmac.new(key, message, hashlib.sha256).hexdigest()


@dataclass(frozen=True)
class SigningKey:
    """A shared signing key and where it was read from; the key itself never appears in repr or output."""

    secret: bytes = field(repr=False)
    source: str

    @property
    def key_id(self) -> str:
        """A public name for the key: 16 hex characters of an HMAC under it (the key cannot be read back)."""
        return hmac_sha256(self.secret, _KEY_ID_MESSAGE)[:16]


def _check_mode(path: Path, mode: int) -> None:
    if os.name != "posix":
        return
    if mode & (stat.S_IRWXO | stat.S_IWGRP):
        raise InvalidInputError(
            f"signing key file {path} must not be readable or writable by other users (or writable by its group), "
            f"got mode {stat.S_IMODE(mode):o}; fix it with: chmod 600 {path} (or 640 to share it with a group)"
        )


def load_signing_key(path: str | os.PathLike) -> SigningKey:
    """Read a key file: its bytes without trailing line breaks, at least ``MIN_KEY_BYTES`` long, private."""
    key_path = Path(path).expanduser()
    try:
        info = key_path.stat()
    except OSError as e:
        raise InvalidInputError(f"signing key file {key_path} cannot be read ({e.strerror}); check the path") from None
    if not stat.S_ISREG(info.st_mode):
        raise InvalidInputError(f"signing key file {key_path} must be a regular file, got another kind of file; check the path")
    _check_mode(key_path, info.st_mode)
    try:
        secret = key_path.read_bytes().rstrip(b"\r\n")
    except OSError as e:
        raise InvalidInputError(f"signing key file {key_path} cannot be read ({e.strerror}); check its permissions") from None
    if len(secret) < MIN_KEY_BYTES:
        raise InvalidInputError(
            f"signing key file {key_path} must hold at least {MIN_KEY_BYTES} bytes, got {len(secret)}; {_MAKE_KEY}"
        )
    return SigningKey(secret=secret, source=str(key_path))


def signing_key_from(path: str | os.PathLike | None) -> SigningKey | None:
    """The key from ``path`` if given, else from the file named by ``$KINETOME_SIGNING_KEY_FILE``, else None."""
    if path is not None:
        return load_signing_key(path)
    named = os.environ.get(KEY_ENV_VAR, "").strip()
    if not named:
        return None
    try:
        return load_signing_key(named)
    except InvalidInputError as e:
        raise InvalidInputError(f"${KEY_ENV_VAR}: {e}") from None


def build_signature(manifest: bytes, key: SigningKey) -> bytes:
    """The signature member of a bundle whose manifest is ``manifest``."""
    doc = {"format": SIGNATURE_FORMAT, "algorithm": ALGORITHM, "key_id": key.key_id, "mac": hmac_sha256(key.secret, manifest)}
    return (json.dumps(doc, indent=1, sort_keys=True) + "\n").encode()


@dataclass(frozen=True)
class SignatureCheck:
    """What import found: ``status`` is ``verified``, ``unsigned`` or ``unchecked`` (signed, no key given)."""

    status: str
    key_id: str | None = None
    warning: str | None = None

    def to_dict(self) -> dict[str, str | None]:
        return {"status": self.status, "key_id": self.key_id}


def _parse_signature(signature: bytes) -> dict[str, str]:
    try:
        doc = json.loads(signature.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as e:
        raise SignatureError(f"member {SIGNATURE_NAME!r} is not JSON text ({e}); the bundle was damaged or altered: refused") from None
    fields = ("format", "algorithm", "key_id", "mac")
    if not isinstance(doc, dict) or sorted(doc) != sorted(fields) or not all(isinstance(doc[k], str) for k in fields):
        raise SignatureError(f"member {SIGNATURE_NAME!r} must be an object of the text fields {', '.join(fields)}; the bundle was altered: refused")
    if doc["format"] != SIGNATURE_FORMAT or doc["algorithm"] != ALGORITHM:
        raise SignatureError(
            f"member {SIGNATURE_NAME!r} must be a {SIGNATURE_FORMAT!r} with algorithm {ALGORITHM!r}, got "
            f"{doc['format']!r:.60} with {doc['algorithm']!r:.40}; refused"
        )
    return doc


def check_signature(signature: bytes | None, manifest: bytes, key: SigningKey | None, *, required: bool) -> SignatureCheck:
    """Check a bundle's signature member against its manifest; raise SignatureError when refused.

    Refused: a malformed signature; when ``required``, an unsigned bundle or no key to check with;
    with a key, a bundle signed with another key or whose manifest changed after signing.
    """
    needs = "this store requires signed bundles (kinetome store-settings)"
    if signature is None:
        if required:
            raise SignatureError(f"the bundle is not signed and {needs}: refused; ask for a bundle exported with the team's signing key")
        warning = None if key is None else f"the bundle is not signed (key {key.key_id} from {key.source} was not used)"
        return SignatureCheck("unsigned", None, warning)
    doc = _parse_signature(signature)
    claimed = doc["key_id"]
    if key is None:
        if required:
            raise SignatureError(f"the bundle is signed (key id {claimed:.16}) and {needs}, but no key was given to check it: refused; {_KEY_HOW}")
        return SignatureCheck("unchecked", claimed, f"the bundle says it is signed with key id {claimed:.16}; the signature was not checked ({_KEY_HOW} to check it)")
    if not hmac.compare_digest(claimed.encode(), key.key_id.encode()):
        raise SignatureError(
            f"the bundle is signed with key id {claimed:.16}, but the key given ({key.source}) has key id {key.key_id}: "
            "refused; use the key it was signed with, or ask for a bundle signed with yours"
        )
    if not hmac.compare_digest(doc["mac"].encode(), hmac_sha256(key.secret, manifest).encode()):
        raise SignatureError(
            f"the signature (key id {key.key_id}) does not match the bundle's manifest: the manifest was changed after "
            "signing, or the signature was not made with this key: refused; export it again from the source store"
        )
    return SignatureCheck("verified", key.key_id, None)
