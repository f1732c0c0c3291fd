"""Every ``--json`` output carries ``"schema": "kinetome.<output>/<version>"``.

Scripts tell formats apart by this field. Bump an output's version when a key
is removed or renamed or its meaning changes; adding a key needs no bump.
"""

from __future__ import annotations

from typing import Any, Mapping

__all__ = ["SCHEMA_VERSIONS", "schema_name", "tagged"]

SCHEMA_VERSIONS: dict[str, int] = {
    "register": 1,
    "list": 1,
    "show": 1,
    "lineage": 1,
    "diff": 1,
    "verify": 1,
    "import": 1,
    "promote": 1,
    "copy-store": 1,
    "store-settings": 1,
    "run": 1,
    "run-chooser": 1,
    "fit": 1,
    "retrain": 1,
    "train": 1,
    "check": 1,
    "plan": 1,
    "demo": 1,
    "sweep": 1,
    "retrain-batch": 1,
    "learn-initiation": 1,
}


def schema_name(output: str) -> str:
    """``kinetome.<output>/<version>`` for a known output (KeyError names the known ones)."""
    try:
        return f"kinetome.{output}/{SCHEMA_VERSIONS[output]}"
    except KeyError:
        raise KeyError(f"unknown output {output!r}; known: {', '.join(SCHEMA_VERSIONS)}") from None


def tagged(output: str, data: Mapping[str, Any]) -> dict[str, Any]:
    """``data`` with ``schema`` first."""
    return {"schema": schema_name(output), **{k: v for k, v in data.items() if k != "schema"}}
