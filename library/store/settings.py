"""Per-store settings kept in the index's ``store_info`` table (both backends); today one:
whether imported bundles must be signed. Changed only by an explicit call, which is audited."""

from __future__ import annotations

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.store import audit, index
from kinetome.library.store.index_backend import IndexBackend

__all__ = ["REQUIRE_SIGNATURES_KEY", "SETTING_NAMES", "requires_signatures", "set_require_signatures", "store_settings"]

REQUIRE_SIGNATURES_KEY = "require_signatures"
# the user-facing name of each setting (CLI ``--require-signatures``, JSON key) -> its store_info key
SETTING_NAMES = {"require_signatures": REQUIRE_SIGNATURES_KEY}
_VALUES = {"on": True, "off": False}


def requires_signatures(conn: IndexBackend) -> bool:
    """True when this store refuses unsigned or unverifiable bundles (absent: off)."""
    value = index.store_info(conn, REQUIRE_SIGNATURES_KEY)
    if value is None:
        return False
    if value not in _VALUES:
        raise StoreIntegrityError(
            f"store setting {REQUIRE_SIGNATURES_KEY} must be 'on' or 'off', got {value!r:.40} (the index was changed "
            "outside kinetome); set it again with: kinetome store-settings --require-signatures on|off"
        )
    return _VALUES[value]


def store_settings(conn: IndexBackend) -> dict[str, bool]:
    """Every setting of the store with its value."""
    return {"require_signatures": requires_signatures(conn)}


def set_require_signatures(conn: IndexBackend, on: bool) -> bool:
    """Turn the requirement on or off (an audit entry ``settings-changed`` when it changes); returns whether it changed."""
    with conn.write_transaction():
        before = requires_signatures(conn)
        if before == on:
            return False
        index.set_store_info(conn, REQUIRE_SIGNATURES_KEY, "on" if on else "off")
        audit.append_entry(
            conn, "settings-changed", name=None, subject="require_signatures", created_at=index.utc_now(),
            detail={"setting": "require_signatures", "from": "on" if before else "off", "to": "on" if on else "off"},
        )
    return True
