"""The Python API for the three jobs kinetome does; the CLI is built on it.

- ``register_skill(spec_path, store=...)``: validate a YAML spec, store it as ``name@N``;
- ``retrain(ref, variant=..., store=...)``: refine a stored skill on a changed task, store the child;
- ``check_chain(chain_path, store=...)``: prove or measure that a chain of skills composes.

Plus ``open_store``, ``load``, ``run`` and ``fit``. Heavy libraries load lazily.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

__all__ = ["open_store", "register_skill", "spec_version_files", "version_files", "load", "sample_starts"]


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


def spec_version_files(skill: Any) -> dict[str, bytes]:
    """The files of a spec's first version (as ``version_files`` of the built skill), without torch."""
    from .controllers import context_from_rig, parameters_bytes, plan_controller
    from .runtime.files import PARAMS_FILE, SPEC_FILE
    from .spec import canonical_json, skill_to_document
    from .tasks import default_rig

    c = skill.controller
    plan = plan_controller(c.kind, context_from_rig(default_rig(skill.env)), **c.build_arguments())
    return {SPEC_FILE: canonical_json(skill_to_document(skill)), PARAMS_FILE: parameters_bytes(plan.values, c.kind)}


def register_skill(spec_path: str | Path, *, store: Any) -> Any:
    """Validate ``spec_path`` and store it; identical content returns the existing version.
    Structured kinds never import torch here."""
    from .spec_load import load_spec

    skill = load_spec(spec_path)
    meta = {
        "description": skill.description,
        "env": skill.env,
        "kind": skill.controller.kind,
        "tags": list(skill.tags),
        "source_file": Path(spec_path).name,
    }
    return store.add(skill.name, spec_version_files(skill), parent=None, reason="registered", meta=meta)


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
    progress: Any = None,
) -> dict[str, Any]:
    """Fit duration, reward and end-state models from rollouts; attach them to the version.
    ``progress(done, total)`` follows the rollouts."""
    from kinetome.trainers.fitting import collect_and_fit  # trainers only here, lazily

    from .tasks import load_start_file, load_variant_file, task_rig

    if episodes < 20:
        from .errors import InvalidInputError

        raise InvalidInputError(f"--episodes must be >= 20 so that enough episodes run for a held-out split, got {episodes}")
    loaded = load(ref, store=store)
    rig = task_rig(loaded.skill.env, load_variant_file(variant))
    models = collect_and_fit(loaded, rig, episodes=episodes, seed=seed, workers=workers, start=load_start_file(start), progress=progress)
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
    return OptionModels.from_files({role: store.read_model(latest, role) for role in latest.roles})


# Trainer settings for `kinetome retrain` without --config: sized for the
# structured controllers (PD, CPG, linear) the demo skills use.
RETRAIN_DEFAULTS: dict[str, Any] = {
    "env_step_budget": 49152,
    "parallel_envs": 32,
    "segment_steps": 64,
    "update_passes": 8,
    "minibatch_size": 512,
    "learning_rate": 0.01,
    "learning_rate_schedule": "linear",
    "gamma": 0.98,
    "lambda": 0.95,
    "success_bonus": 5.0,
    "eval_episodes": 64,
    "checkpoint_every": 4,
}


def _train_config(config: str | Path | None, overrides: dict[str, Any]) -> Any:
    from kinetome.trainers.config import config_from_mapping, load_train_config

    if config is None:
        base = config_from_mapping(dict(RETRAIN_DEFAULTS), source="<retrain defaults>")
    else:
        base = load_train_config(config)
    import dataclasses

    return dataclasses.replace(base, **{k: v for k, v in overrides.items() if v is not None})


def retrain(
    ref: str,
    *,
    store: Any,
    variant: str | Path,
    env_step_budget: int | None = None,
    deliberation_cost: float | None = None,
    seed: int = 0,
    from_scratch: bool = False,
    workers: int = 1,
    config: str | Path | None = None,
    start: str | Path | None = None,
    out_dir: str | Path | None = None,
    resume: bool = False,
    refit_episodes: int = 200,
    progress: Any = None,
) -> dict[str, Any]:
    """Retrain a stored skill on a task variant and store the child version with its evidence.

    Measures the parent on the variant, trains, measures again, registers
    ``name@N+1`` (reason ``retrained``, lineage: parent, variant, config, seed,
    steps, before/after metrics, learning curve) and refits its option models
    on the variant.
    """
    from kinetome.trainers.curves import save_curves
    from kinetome.trainers.retrain import refuse_deliberation_cost, retrain_skill

    from .runtime.skill import PARAMS_FILE, SPEC_FILE
    from .spec import canonical_json, skill_to_document
    from .tasks import load_start_file, load_variant_file, task_rig

    cfg = _train_config(config, {"env_step_budget": env_step_budget, "deliberation_cost": deliberation_cost})
    refuse_deliberation_cost(cfg, "--deliberation-cost" if deliberation_cost else f"{config}: deliberation_cost")
    parent = load(ref, store=store)
    task_variant = load_variant_file(variant)
    rig = task_rig(parent.skill.env, task_variant)
    out = Path(out_dir) if out_dir is not None else Path("kinetome-retrain") / parent.ref.replace("@", "-")
    out.mkdir(parents=True, exist_ok=True)
    result = retrain_skill(
        parent,
        rig,
        cfg,
        start=load_start_file(start),
        seed=seed,
        workers=workers,
        progress=progress,
        checkpoint_dir=out / "checkpoints",
        resume=resume,
        from_scratch=from_scratch,
    )
    csv_path, png_path = save_curves(result.curve, out, stem="curve", title=f"retrain {parent.ref} on {Path(variant).stem}")
    files = {
        SPEC_FILE: canonical_json(skill_to_document(parent.skill)),
        PARAMS_FILE: result.parameters_bytes,
        "normaliser.safetensors": result.normaliser,
        "curve.csv": result.curve_csv().encode("utf-8"),
    }
    meta = {
        **result.metadata(),
        "description": parent.skill.description,
        "env": parent.skill.env,
        "kind": parent.skill.controller.kind,
        "variant": {"file": str(variant), "name": getattr(task_variant, "name", None), "digest": getattr(task_variant, "digest", None)},
        "metrics_before": result.before.as_dict(),
        "metrics_after": result.after.as_dict(),
    }
    added = store.add(parent.skill.name, files, parent=parent.ref, reason="retrained", meta=meta)
    child = added.version.ref
    fitted = fit(child, store=store, episodes=refit_episodes, variant=variant, start=start, seed=seed, workers=workers) if refit_episodes else None
    return {
        "parent": parent.ref,
        "child": child,
        "created": added.created,
        "variant": str(variant),
        "before": result.before.as_dict(),
        "after": result.after.as_dict(),
        "steps": result.steps,
        "wall_time_s": result.wall_time,
        "curve_csv": str(csv_path),
        "curve_png": str(png_path),
        "models": fitted,
        "lineage": [v.ref for v in store.lineage(child)],
    }


def train(config_path: str | Path, *, store: Any, seed: int | None = None, workers: int = 1, out_dir: str | Path | None = None, progress: Any = None) -> dict[str, Any]:
    """Train stored skills together with a policy over them; store the refined skills as children."""
    from kinetome.trainers.config import TrainTask, load_train_file
    from kinetome.trainers.curves import save_curves
    from kinetome.trainers.train_set import train_skills

    from .errors import InvalidInputError
    from .runtime.skill import PARAMS_FILE, SPEC_FILE
    from .spec import canonical_json, skill_to_document
    from .tasks import load_start_file, load_variant_file, task_rig

    loaded = load_train_file(config_path)
    cfg, task = loaded.config, loaded.task or TrainTask()
    if not loaded.skills:
        raise InvalidInputError(f"{config_path}: skills: a training file for `kinetome train` must list skills; add skills: [name, ...]")
    skills = [load(ref, store=store) for ref in loaded.skills]
    env = task.env or skills[0].skill.env
    variant = load_variant_file(task.variant)
    rig = task_rig(env, variant)
    skills = [load(s.ref, store=store, rig=rig) for s in skills]
    out = Path(out_dir) if out_dir is not None else Path("kinetome-train") / Path(config_path).stem
    out.mkdir(parents=True, exist_ok=True)
    result = train_skills(skills, rig, cfg, start=load_start_file(task.initial_states), seed=seed, workers=workers, progress=progress, checkpoint_dir=out / "checkpoints")
    csv_path, png_path = save_curves(result.curve, out, stem="curve", title=f"train {Path(config_path).stem}")
    children = []
    for s in skills:
        files = {
            SPEC_FILE: canonical_json(skill_to_document(s.skill)),
            PARAMS_FILE: result.parameters_bytes[s.ref],
            "normaliser.safetensors": result.normaliser,
            "critic.safetensors": result.critic,
        }
        if result.terminations is not None:
            files["terminations.safetensors"] = result.terminations
        meta = {**result.metadata(), "description": s.skill.description, "env": s.skill.env, "kind": s.skill.controller.kind, "variant": task.variant, "trained_with": list(loaded.skills)}
        children.append(store.add(s.skill.name, files, parent=s.ref, reason="retrained", meta=meta).version.ref)
    return {
        "skills": list(result.skill_refs),
        "children": children,
        "termination_rate": result.termination_rate,
        "mean_skill_duration": result.mean_skill_duration,
        "mean_return": result.mean_return,
        "skill_share": result.skill_share,
        "steps": result.steps,
        "curve_csv": str(csv_path),
        "curve_png": str(png_path),
    }


def check_chain(
    chain_path: str | Path,
    *,
    store: Any,
    method: str = "auto",
    episodes: int | None = None,
    seed: int | None = None,
    workers: int = 1,
    report_dir: str | Path | None = None,
    progress: Any = None,
) -> Any:
    """Check a chain file handoff by handoff; optionally write the report folder.
    ``progress(done, total)`` follows the simulation, when one runs.

    Returns a ``CheckResult``: ``exit_code`` 0 all compose, 1 some handoff
    breaks, 3 some unsure (bad input raises ``InvalidInputError``, exit 2).
    """
    from .checker import check_chain as _check

    result = _check(chain_path, store=store, method=method, episodes=episodes, seed=seed, workers=workers, progress=progress)
    if report_dir is not None:
        from .report.checker_plots import write_report

        write_report(result, report_dir)
    return result
