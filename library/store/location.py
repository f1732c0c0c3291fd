"""Where the store lives: ``--store``, else ``$KINETOME_STORE``, else the user data folder."""

from __future__ import annotations

import os
from pathlib import Path

from kinetome.library.errors import InvalidInputError

__all__ = ["STORE_ENV_VAR", "resolve_store_root"]

STORE_ENV_VAR = "KINETOME_STORE"


def resolve_store_root(cli_value: str | os.PathLike | None) -> Path:
    """The store folder to use: the ``--store`` value, else ``$KINETOME_STORE``, else
    ``platformdirs.user_data_dir("kinetome")/store``."""
    if cli_value is not None:
        if str(cli_value).strip() == "":
            raise InvalidInputError("--store must be a folder path, got ''; pass e.g. --store ./my-store")
        return Path(cli_value).expanduser()
    env_value = os.environ.get(STORE_ENV_VAR, "")
    if env_value.strip():
        return Path(env_value).expanduser()
    import platformdirs

    return Path(platformdirs.user_data_dir("kinetome")) / "store"
