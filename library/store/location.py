"""Where the store lives: ``--store`` / ``$KINETOME_STORE`` (a folder, or a ``postgresql://`` URL),
else the user data folder; its blobs: ``--blobs`` / ``$KINETOME_BLOBS`` (a folder or ``s3://...``)."""

from __future__ import annotations

import os
from pathlib import Path
from urllib.parse import parse_qs, urlsplit, urlunsplit

from kinetome.library.errors import InvalidInputError

__all__ = [
    "STORE_ENV_VAR",
    "BLOBS_ENV_VAR",
    "DATABASE_SCHEMES",
    "is_database_url",
    "check_database_url",
    "resolve_store_root",
    "resolve_blobs",
]

STORE_ENV_VAR = "KINETOME_STORE"
BLOBS_ENV_VAR = "KINETOME_BLOBS"
DATABASE_SCHEMES = ("postgresql", "postgres")

_PASSWORD_FIX = (
    "a password in a store URL ends up in shell history and process lists; put it in a password file "
    "(~/.pgpass or $PGPASSFILE) or a service file ($PGSERVICEFILE with ?service=NAME), or set PGPASSWORD, "
    "and leave it out of the URL"
)


def is_database_url(location: object) -> bool:
    """True for ``postgresql://...`` (or ``postgres://...``): a store whose index is on a server."""
    text = str(location)
    return any(text.startswith(f"{scheme}://") for scheme in DATABASE_SCHEMES)


def check_database_url(url: str, *, what: str = "--store") -> str:
    """Refuse a URL that carries a password; return the URL for display (it then holds none)."""
    parts = urlsplit(url)
    try:
        password = parts.password
    except ValueError as e:
        raise InvalidInputError(f"{what} must be a postgresql:// URL, got {url!r} ({e}); e.g. postgresql://db.lab/kinetome") from e
    if password is not None or "password" in parse_qs(parts.query):
        shown = urlunsplit(parts._replace(netloc=parts.netloc.rsplit("@", 1)[-1], query=""))
        raise InvalidInputError(f"{what} must not contain a password, got one in {shown}; {_PASSWORD_FIX}")
    return url


def resolve_store_root(cli_value: str | os.PathLike | None) -> Path | str:
    """The store to use: the ``--store`` value, else ``$KINETOME_STORE``, else
    ``platformdirs.user_data_dir("kinetome")/store``. A folder comes back as a Path,
    a ``postgresql://`` URL as the (password-free) URL text."""
    if cli_value is not None:
        if str(cli_value).strip() == "":
            raise InvalidInputError("--store must be a folder path or a postgresql:// URL, got ''; pass e.g. --store ./my-store")
        return _store_value(str(cli_value), "--store")
    env_value = os.environ.get(STORE_ENV_VAR, "")
    if env_value.strip():
        return _store_value(env_value, f"${STORE_ENV_VAR}")
    import platformdirs

    return Path(platformdirs.user_data_dir("kinetome")) / "store"


def _store_value(text: str, what: str) -> Path | str:
    if is_database_url(text):
        return check_database_url(text, what=what)
    return Path(text).expanduser()


def resolve_blobs(cli_value: str | os.PathLike | None) -> str | None:
    """The blob location: the ``--blobs`` value, else ``$KINETOME_BLOBS``, else None (the store decides:
    its own folder, or the location recorded when it was created)."""
    for value, what in ((cli_value, "--blobs"), (os.environ.get(BLOBS_ENV_VAR), f"${BLOBS_ENV_VAR}")):
        if value is None or (what != "--blobs" and not str(value).strip()):
            continue
        text = str(value).strip()
        if not text:
            raise InvalidInputError(f"{what} must be a folder or an s3://bucket/prefix URL, got ''; e.g. --blobs /mnt/team/kinetome")
        return text
    return None
