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


def run(
    ref: str,
    *,
    store: Any,
    variant: str | Path | None = None,
    start: str | Path | None = None,
    episodes: int = 100,
    seed: int = 0,
    workers: int = 1,
    confidence: float = 0.95,
    progress: Any = None,
) -> dict[str, Any]:
    """Run a stored skill for ``episodes`` and summarise: success interval, steps, return, limits."""
    from .runtime.execute import run_skill
    from .runtime.summary import limit_exceedances, summarize_rollout
    from .tasks import load_start_file, load_variant_file, task_rig

    if episodes < 1:
        from .errors import InvalidInputError

        raise InvalidInputError(f"--episodes must be >= 1, got {episodes}")
    loaded = load(ref, store=store)
    rig = task_rig(loaded.skill.env, load_variant_file(variant))
    qpos, qvel = sample_starts(rig, load_start_file(start), episodes, seed=seed)
    rollout = run_skill(loaded, rig, starts=(qpos, qvel), seed=seed, workers=workers, progress=progress)
    summary = summarize_rollout(rollout, confidence=confidence)
    limits = loaded.skill.limits.as_dict() if loaded.skill.limits else {}
    summary["skill"] = loaded.ref
    summary["variant"] = None if variant is None else str(variant)
    summary["limits"] = limit_exceedances(rollout, [limits])
    return summary


MODEL_KIND = "option-models"


def fit(
    ref: str,
    *,
    store: Any,
    episodes: int = 400,
    variant: str | Path | None = None,
    start: str | Path | None = None,
    seed: int = 0,
    workers: int = 1,
) -> dict[str, Any]:
    """Fit duration, reward and end-state models from rollouts; attach them to the version."""
    from kinetome.trainers.fitting import collect_and_fit  # trainers only here, lazily

    from .tasks import load_start_file, load_variant_file, task_rig

    if episodes < 8:
        from .errors import InvalidInputError

        raise InvalidInputError(f"--episodes must be >= 8 to leave a held-out split, got {episodes}")
    loaded = load(ref, store=store)
    rig = task_rig(loaded.skill.env, load_variant_file(variant))
    models = collect_and_fit(loaded, rig, episodes=episodes, seed=seed, workers=workers, start=load_start_file(start))
    errors = models.summary()
    meta = {"errors": errors, "episodes": episodes, "seed": seed, "env": rig.env_id, "variant": None if variant is None else str(variant)}
    record = store.attach_model(loaded.ref, MODEL_KIND, models.to_files(), meta=meta)
    return {"skill": loaded.ref, "model_ref": record.ref, "episodes": episodes, "errors": errors}


def load_models(ref: str, *, store: Any) -> Any:
    """The latest attached option models of a version, or None."""
    from .option_models import OptionModels

    records = [m for m in store.models(store.get(ref).ref) if m.kind == MODEL_KIND]
    if not records:
        return None
    latest = max(records, key=lambda m: m.revision)
    return OptionModels.from_files(store.read_model(latest))
