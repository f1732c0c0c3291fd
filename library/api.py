"""The Python API for the three jobs kinetome does; the CLI is built on it.

- ``register_skill(spec_path, store=...)``: validate a YAML spec, store it as ``name@N``;
- ``retrain(ref, variant=..., store=...)``: refine a stored skill on a changed task, store the child;
- ``check_chain(chain_path, store=...)``: prove or measure that a chain of skills composes.

Plus ``open_store``, ``load``, ``run`` and ``fit``. Heavy libraries load lazily.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

__all__ = ["open_store", "register_skill", "version_files", "load", "sample_starts"]


def open_store(root: str | Path | None = None, *, create: bool = True) -> Any:
    """The store at ``root``, else $KINETOME_STORE, else the user data dir."""
    from .store import Store, resolve_store_root

    return Store(resolve_store_root(None if root is None else str(root)), create=create)


def version_files(loaded: Any) -> dict[str, bytes]:
    """The files that make a version's content: canonical spec and parameters."""
    from .controllers import save_parameters
    from .runtime.skill import PARAMS_FILE, SPEC_FILE
    from .spec import canonical_json, skill_to_document

    return {SPEC_FILE: canonical_json(skill_to_document(loaded.skill)), PARAMS_FILE: save_parameters(loaded.controller)}


def register_skill(spec_path: str | Path, *, store: Any) -> Any:
    """Validate ``spec_path`` and store it; identical content returns the existing version."""
    from .runtime.skill import skill_from_spec
    from .spec_load import load_spec

    skill = load_spec(spec_path)
    loaded = skill_from_spec(skill)
    meta = {
        "description": skill.description,
        "env": skill.env,
        "kind": skill.controller.kind,
        "tags": list(skill.tags),
        "source_file": Path(spec_path).name,
    }
    return store.add(skill.name, version_files(loaded), parent=None, reason="registered", meta=meta)


def load(ref: str, *, store: Any, rig: Any = None) -> Any:
    """A stored version ready to run (``LoadedSkill``)."""
    from .runtime.skill import load_skill

    return load_skill(store, ref, rig=rig)


def sample_starts(rig: Any, start: Any, n: int, *, seed: int) -> tuple[Any, Any]:
    """n start states from a start distribution (or the rig's default)."""
    from .runtime.starts import sample_starts as _sample

    return _sample(rig, start, n, seed=seed)
