"""The Python API for the three jobs kinetome does; the CLI is built on it.

- ``register(spec_path, store=...)``: validate a YAML spec, store it as ``name@N``;
- ``retrain(ref, variant=..., store=...)``: refine a stored skill on a changed task, store the child;
- ``check_chain(chain_path, store=...)``: prove or measure that a chain of skills composes.

Plus ``open_store``, ``load``, ``run``, ``fit``, ``train`` and
``sample_initial_states``. The dicts that ``run``, ``fit``, ``retrain`` and
``train`` return are what ``--json`` prints: each carries ``schema`` (see
``library/output_schema.py``). Heavy libraries load lazily.
"""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import Any

from .output_schema import tagged
from .renamed_keys import RenamedKeyWarning, renamed_arguments

__all__ = [
    "open_store",
    "register",
    "load",
    "load_models",
    "attach_models",
    "model_task",
    "run",
    "fit",
    "retrain",
    "train",
    "check_chain",
    "plan_chain",
    "learn_initiation",
    "sample_initial_states",
    "spec_version_files",
    "version_files",
    "RETRAIN_DEFAULTS",
    "resolve",
    "sweep",
]


def open_store(
    root: str | Path | None = None, *, blobs: str | Path | None = None, create: bool = True, read_only: bool = False
) -> Any:
    """The store at ``root`` (a folder or a postgresql:// URL), else $KINETOME_STORE, else the user
    data dir; its blobs at ``blobs``, else $KINETOME_BLOBS, else where the store recorded them.
    ``read_only``: the caller only reads (lighter on a PostgreSQL store; changes raise)."""
    from .store import Store, resolve_blobs, resolve_store_root

    store_root = resolve_store_root(None if root is None else str(root))
    return Store(store_root, blobs=resolve_blobs(blobs), create=create, read_only=read_only)


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


def register(spec_path: str | Path, *, store: Any) -> Any:
    """Validate ``spec_path`` and store it as a version that is current for the nominal task.

    The first version of a name is ``registered``; a changed spec under an existing name is
    ``revised`` with the nominal current version as parent. Returns the store's
    ``AddResult``: ``.version`` and ``.is_new`` (False when identical content was stored
    before; that version is returned and nothing changes). Structured controller kinds
    never import torch here.
    """
    from .spec_load import load_spec

    skill = load_spec(spec_path)
    meta = {
        "description": skill.description,
        "env": skill.env,
        "kind": skill.controller.kind,
        "tags": list(skill.tags),
        "source_file": Path(spec_path).name,
    }
    return store.register(skill.name, spec_version_files(skill), meta=meta)


def resolve(ref: str, *, store: Any, variant: Any = None) -> str:
    """The pinned ``name@N`` a reference means on a task: a bare name is the current version
    for ``variant`` (a TaskVariant, or None for nominal), else the current one for nominal."""
    return store.get(ref, task=getattr(variant, "name", None)).ref


def register_skill(spec_path: str | Path, *, store: Any) -> Any:
    """Old name of ``register`` (warns)."""
    warnings.warn(RenamedKeyWarning("'api.register_skill' is an old spelling; write 'api.register' instead"), stacklevel=2)
    return register(spec_path, store=store)


def load(ref: str, *, store: Any, rig: Any = None) -> Any:
    """A stored version ready to run (``LoadedSkill``)."""
    from .runtime.skill import load_skill

    return load_skill(store, ref, rig=rig)


def sample_initial_states(rig: Any, initial_states: Any, n: int, *, seed: int) -> tuple[Any, Any]:
    """n initial states (qpos, qvel) from an initial-states file's distribution (or the env's default)."""
    from .runtime.starts import sample_starts as _sample

    return _sample(rig, initial_states, n, seed=seed)


def _check_episodes(episodes: int) -> None:
    if episodes < 1:
        from .errors import InvalidInputError

        raise InvalidInputError(f"--episodes must be >= 1, got {episodes}")


@renamed_arguments({"start": "initial_states"})
def run(
    ref: str,
    *,
    store: Any,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    episodes: int = 100,
    seed: int = 0,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    confidence: float = 0.95,
    progress: Any = None,
) -> dict[str, Any]:
    """Run a stored skill for ``episodes``: success counts and interval, duration, return, outcomes, limits.

    ``workers``: Ray worker processes (None: this process); ``address``: a running Ray cluster;
    ``threads``: MuJoCo threads in this process. The result is the same bits for any of them.
    """
    from .execution.spread import run_chain_spread
    from .runtime.summary import limit_exceedances, summarize_rollout
    from .safety import caution_for
    from .initial_states import initial_states_for
    from .tasks import load_variant_file, task_rig

    _check_episodes(episodes)
    task_variant = load_variant_file(variant)
    loaded = load(resolve(ref, store=store, variant=task_variant), store=store)
    rig = task_rig(loaded.skill.env, task_variant)
    qpos, qvel = sample_initial_states(rig, initial_states_for(loaded.skill, initial_states), episodes, seed=seed)
    rollout = run_chain_spread([loaded], rig, starts=(qpos, qvel), seed=seed, workers=workers, address=address, threads=threads,
                               progress=progress)
    summary = summarize_rollout(rollout, confidence=confidence)
    limits = loaded.skill.limits.as_dict() if loaded.skill.limits else {}
    summary["skill"] = loaded.ref
    summary["variant"] = None if variant is None else str(variant)
    summary["limits"] = limit_exceedances(rollout, [limits])
    summary["caution"] = caution_for(rig)
    return tagged("run", summary)


@renamed_arguments({"start": "initial_states"})
def run_chooser(
    ref: str,
    *,
    store: Any,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    episodes: int = 100,
    seed: int = 0,
    threads: int = 1,
    workers: int | None = None,
    address: str | None = None,
    progress: Any = None,
) -> dict[str, Any]:
    """Run the skills trained together with ``ref`` under their chooser (the policy over skills) and summarise.

    Runs in this process (``threads`` MuJoCo threads); worker processes are refused for now.
    """
    from .runtime.files import CHOOSER_KIND
    from .runtime.learned import Chooser
    from .runtime.options import run_options
    from .safety import caution_for
    from .tasks import load_start_file, load_variant_file, task_rig

    _check_episodes(episodes)
    from .errors import InvalidInputError, NotFoundError

    if address is not None or (workers or 1) > 1:
        raise InvalidInputError("--chooser runs in this process only: drop --workers/--address (use --threads for MuJoCo threads)")

    try:
        model = store.get_model(ref, CHOOSER_KIND)
    except NotFoundError:
        raise NotFoundError(
            f"{ref} must have been trained together with other skills (`kinetome train`) to run under a chooser, "
            "got a version without one; run it alone without --chooser"
        ) from None
    chooser = Chooser.from_files({role: store.read_model(model, role) for role in model.roles})
    first = load(chooser.skill_refs[0], store=store)
    rig = task_rig(first.skill.env, load_variant_file(variant))
    skills = [load(r, store=store, rig=rig) for r in chooser.skill_refs]
    qpos, qvel = sample_initial_states(rig, load_start_file(initial_states), episodes, seed=seed)
    out = run_options(skills, chooser, rig, starts=(qpos, qvel), seed=seed, workers=threads,
                      episode_steps=chooser.features.limit or None, progress=progress)
    summary = out.summary()
    summary.update(chooser=model.ref, variant=None if variant is None else str(variant), caution=caution_for(rig),
                   stops={s.ref: "stops_when" if s.learned_stop is None else s.learned_stop.describe() for s in skills})
    return tagged("run-chooser", summary)


MODEL_KIND = "option-models"


def model_task(rig: Any) -> dict[str, Any]:
    """The task option models are fitted on and may be used for: env, variant name and digest."""
    variant = rig.variant
    return {"env": rig.env_id, "variant": getattr(variant, "name", "nominal"), "variant_digest": getattr(variant, "digest", "")}


def attach_models(store: Any, ref: str, models: Any, *, rig: Any, settings: dict[str, Any], meta: dict[str, Any]) -> Any:
    """Attach fitted option models to version ``ref`` with their provenance: the task (env, variant
    digest), the version's content identity (the artifact's ``computed_on``), the fitting settings and
    the software versions (MuJoCo, gymnasium, numpy, torch...)."""
    from .provenance import software_versions

    return store.attach_artifact(
        ref, MODEL_KIND, models.to_files(), task=model_task(rig), settings=settings, software=software_versions(), meta=meta
    )


@renamed_arguments({"start": "initial_states"})
def fit(
    ref: str,
    *,
    store: Any,
    episodes: int = 400,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    seed: int = 0,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    progress: Any = None,
) -> dict[str, Any]:
    """Fit duration, reward and end-state models from rollouts; attach them to the version.
    ``progress(done, total)`` follows the rollouts; ``workers``/``address``/``threads`` as in ``run``."""
    from kinetome.trainers.fitting import collect_and_fit  # trainers only here, lazily

    from .initial_states import initial_states_for
    from .tasks import load_variant_file, task_rig

    if episodes < 20:
        from .errors import InvalidInputError

        raise InvalidInputError(f"--episodes must be >= 20 so that enough episodes run for a held-out split, got {episodes}")
    task_variant = load_variant_file(variant)
    loaded = load(resolve(ref, store=store, variant=task_variant), store=store)
    rig = task_rig(loaded.skill.env, task_variant)
    models = collect_and_fit(loaded, rig, episodes=episodes, seed=seed, workers=workers, address=address, threads=threads,
                             start=initial_states_for(loaded.skill, initial_states), progress=progress)
    errors = models.summary()
    meta = {"errors": errors, "episodes": episodes, "seed": seed, "env": rig.env_id, "variant": None if variant is None else str(variant)}
    settings = {"episodes": episodes, "seed": seed, "initial_states": None if initial_states is None else str(initial_states)}
    record = attach_models(store, loaded.ref, models, rig=rig, settings=settings, meta=meta)
    from .safety import caution_for

    return tagged("fit", {"skill": loaded.ref, "model_ref": record.ref, "episodes": episodes, "errors": errors, "caution": caution_for(rig)})


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

    given = {k: v for k, v in overrides.items() if v is not None}
    try:
        return dataclasses.replace(base, **given)
    except ValueError as exc:  # the config's own checks: say which option carried the bad value
        from .errors import InvalidInputError

        options = {"env_step_budget": "--budget", "deliberation_cost": "--deliberation-cost"}
        named = ", ".join(f"{options.get(k, k)} {v}" for k, v in given.items())
        raise InvalidInputError(f"{exc} (from {named})") from None


def _budget_note(cfg: Any) -> str | None:
    """How the budget was rounded: training runs whole batches of parallel_envs x segment_steps env steps."""
    batch, budget = cfg.batch_size, cfg.env_step_budget
    if budget % batch == 0:
        return None
    return (
        f"budget {budget:,} env steps rounded up to {cfg.updates * batch:,}: training runs whole batches of "
        f"parallel_envs x segment_steps = {cfg.parallel_envs} x {cfg.segment_steps} = {batch:,} env steps"
    )


@renamed_arguments({"start": "initial_states", "out_dir": "out", "steps": "env_step_budget", "workers": "threads"})
def retrain(
    ref: str, *, store: Any, variant: str | Path, env_step_budget: int | None = None, deliberation_cost: float | None = None,
    seed: int = 0, from_scratch: bool = False, threads: int = 1, config: str | Path | None = None,
    initial_states: str | Path | None = None, out: str | Path | None = None, resume: bool = False, refit_episodes: int = 200,
    promotion_episodes: int | None = None, progress: Any = None, on_run: Any = None, method: str = "auto",
) -> dict[str, Any]:
    """Retrain a stored skill on a task variant and store the child version with its record.

    ``threads``: MuJoCo threads in this process (``workers=`` is its old spelling and warns).

    ``method``: ``actor-critic``, ``search`` (CMA-ES over the skill's bounded parameters) or
    ``auto`` (search for the kinds in ``trainers.retrain.SEARCH_BY_DEFAULT``, else the actor-critic);
    the output and the lineage (``trainer``) say which one ran.

    A bare ``ref`` is the current version for the variant (else for nominal). The child
    ``name@N`` (reason ``retrained``, method ``retrain``) holds the variant and initial-states
    files, the config, seed, code and software versions (``record.json``) and its
    evaluation (``evaluation.json``). It becomes current for the variant, and for nominal,
    only where it is non-inferior on fresh episodes to the version current for that task (the
    parent where none is; ``lineage.promotion``);
    the result on the parent's own task is always reported. Its option models are then
    refitted on the variant.
    """
    from kinetome.trainers.curves import save_curves
    from kinetome.trainers.retrain import choose_method, refuse_deliberation_cost

    from .lineage.promotion import DEFAULT_EPISODES
    from .lineage.retraining import TaskFiles, apply_promotion, current_versions, parent_task_of, run_retrain
    from .retrain_runs import mark_finished, open_run
    from .safety import caution_for
    from .stored_meta import current_meta
    from .tasks import load_variant_file, task_rig

    cfg = _train_config(config, {"env_step_budget": env_step_budget, "deliberation_cost": deliberation_cost})
    refuse_deliberation_cost(cfg, "--deliberation-cost" if deliberation_cost else f"{config}: deliberation_cost")
    task_variant = load_variant_file(variant)
    parent_version = store.get(resolve(ref, store=store, variant=task_variant))
    parent = load(parent_version.ref, store=store)
    chosen = choose_method(parent.skill.controller.kind, method)
    rig = task_rig(parent.skill.env, task_variant)  # built before training: a variant the env cannot take fails now
    run = open_run(parent.ref, variant, store_root=store.location, out=out, resume=resume, seed=seed)
    folder = run.folder
    if on_run is not None:
        on_run(run, _budget_note(cfg))
    current = {task: load(v, store=store) for task, v in current_versions(store, parent.ref, [task_variant.name, "nominal"]).items()}
    draft = run_retrain(
        parent, parent_version.identity, task=TaskFiles.from_paths(variant, initial_states), config=cfg, seed=seed, current=current,
        workdir=folder, checkpoint_dir=run.checkpoint_dir, resume=run.resumed,
        parent_task=parent_task_of(store, parent_version, folder / "parent-task"), from_scratch=from_scratch,
        workers=threads, progress=progress, promotion_episodes=promotion_episodes or DEFAULT_EPISODES, method=chosen,
    )
    result = draft.result
    csv_path, png_path = save_curves(result.curve, folder, stem="curve", title=f"retrain {parent.ref} on {Path(variant).stem}")
    meta = current_meta(draft.meta)
    added = store.add(parent.skill.name, draft.files, parent=parent.ref, reason="retrained", meta=meta)
    child = added.version.ref
    current_for = apply_promotion(store, child, draft.promotion) if added.is_new else store.current_tasks(child)
    mark_finished(run, child)
    fitted = fit(child, store=store, episodes=refit_episodes, variant=variant, initial_states=initial_states, seed=seed, threads=threads) if refit_episodes else None
    return tagged("retrain", {
        "parent": parent.ref, "child": child, "is_new": added.is_new, "variant": str(variant),
        "before": meta["metrics_before"], "after": meta["metrics_after"], "env_steps": result.steps, "trainer": meta["trainer"],
        "method_choice": f"default for {parent.skill.controller.kind} skills" if method == "auto" else "chosen with --method",
        "wall_time_s": result.wall_time, "curve_csv": str(csv_path), "curve_png": str(png_path),
        "promotion": draft.promotion, "current_for": current_for, "models": fitted, "lineage": [v.ref for v in store.lineage(child)],
        "caution": caution_for(rig), "run_folder": str(folder), "resumed": run.resumed, "budget_note": _budget_note(cfg),
    })


@renamed_arguments({"out_dir": "out", "workers": "threads"})
def train(config_path: str | Path, *, store: Any, seed: int | None = None, threads: int = 1, out: str | Path | None = None, progress: Any = None) -> dict[str, Any]:
    """Train stored skills together with a policy over them; store the refined skills as children (method ``train``).

    ``threads``: MuJoCo threads in this process (``workers=`` is its old spelling and warns)."""
    from kinetome.trainers.config import TrainTask, load_train_file
    from kinetome.trainers.curves import save_curves
    from kinetome.trainers.train_set import train_skills

    from .errors import InvalidInputError
    from .runtime.files import CHOOSER_KIND
    from .safety import caution_for
    from .stored_meta import current_meta, variant_record

    loaded = load_train_file(config_path)
    cfg, task = loaded.config, loaded.task or TrainTask()
    if not loaded.skills:
        raise InvalidInputError(f"{config_path}: skills: a training file for `kinetome train` must list skills; add skills: [name, ...]")
    skills = [load(ref, store=store) for ref in loaded.skills]
    from .tasks import load_start_file, load_variant_file, task_rig

    variant = load_variant_file(task.variant)
    rig = task_rig(task.env or skills[0].skill.env, variant)
    skills = [load(s.ref, store=store, rig=rig) for s in skills]
    folder = Path(out) if out is not None else Path("kinetome-train") / Path(config_path).stem
    folder.mkdir(parents=True, exist_ok=True)
    result = train_skills(skills, rig, cfg, start=load_start_file(task.initial_states), seed=seed, workers=threads, progress=progress, checkpoint_dir=folder / "checkpoints")
    csv_path, png_path = save_curves(result.curve, folder, stem="curve", title=f"train {Path(config_path).stem}")
    shared = current_meta({**result.metadata(), "method": "train", "variant": variant_record(task.variant, variant), "initial_states": task.initial_states, "trained_with": list(loaded.skills)})
    from .lineage.retraining import train_record

    with_ids = [(s.ref, store.get(s.ref).identity) for s in skills]
    records = [
        train_record(with_ids[i], with_ids, training_file=config_path, variant_file=task.variant, variant=variant,
                     initial_states_file=task.initial_states, config=result.config.as_dict(), seed=result.config.seed)
        for i in range(len(skills))
    ]
    children = [_store_trained(store, s, result, shared, index, records[index]) for index, s in enumerate(skills)]
    chooser_refs = [store.attach_model(child, CHOOSER_KIND, result.chooser_files(children), {"skills": children}).ref
                    for child in children]
    return tagged("train", {
        "skills": list(result.skill_refs),
        "children": children,
        "stop_rate": shared["stop_rate"],
        "mean_skill_duration": result.mean_skill_duration,
        "mean_return": result.mean_return,
        "skill_share": result.skill_share,
        "env_steps": result.steps,
        "curve_csv": str(csv_path),
        "curve_png": str(png_path),
        "stop_mode": cfg.stop_mode,
        "chooser": chooser_refs[0],
        "caution": caution_for(rig),
    })


def _store_trained(store: Any, skill: Any, result: Any, shared: dict[str, Any], index: int, record: dict[str, Any]) -> str:
    """Store skill ``index`` refined by ``train`` as a child version (with its learned stop, if any, and
    ``record.json``: how it was made); returns its ref."""
    from .lineage.retraining import record_bytes
    from .lineage.roles import RECORD_FILE
    from .runtime.files import NORMALISER_FILE
    from .runtime.skill import PARAMS_FILE, SPEC_FILE
    from .spec import canonical_json, skill_to_document

    files = {
        SPEC_FILE: canonical_json(skill_to_document(skill.skill)),
        PARAMS_FILE: result.parameters_bytes[skill.ref],
        NORMALISER_FILE: result.normaliser,
        **result.stop_files(index),  # the learned stop this version runs with (stop modes other than registered)
        RECORD_FILE: record_bytes(record),
    }
    meta = {**shared, "description": skill.skill.description, "env": skill.skill.env, "kind": skill.skill.controller.kind}
    return store.add(skill.skill.name, files, parent=skill.ref, reason="retrained", meta=meta).version.ref


@renamed_arguments({"report_dir": "out"})
def check_chain(
    chain_path: str | Path,
    *,
    store: Any,
    method: str = "auto",
    episodes: int | None = None,
    seed: int | None = None,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    out: str | Path | None = None,
    progress: Any = None,
    fail_on_gaps: bool = False,
    fail_on_limits: bool = False,
    reuse: bool = True,
) -> Any:
    """Check a chain file handoff by handoff; with ``out``, write the report folder there.
    ``progress(done, total)`` follows the simulation (episodes), when one runs. Simulation blocks run
    in this process (``threads`` MuJoCo threads), on ``workers`` Ray worker processes, or on the Ray
    cluster at ``address``: the result is the same bits for any of them.
    The result is stored as evidence when every skill is a stored version; the same check
    again (same identities, task, settings, software) returns the stored result
    (``result.reused`` is True) unless ``reuse`` is False.

    Returns a ``CheckResult``: ``exit_code`` 0 when every handoff composes and the
    whole chain meets its requirement, 1 when something breaks or fails, 3 when
    unsure (bad input raises ``InvalidInputError``, exit 2). ``result.to_dict()``
    is the JSON-ready value.
    """
    from .checker import check_chain as _check

    result = _check(chain_path, store=store, method=method, episodes=episodes, seed=seed, workers=workers, address=address,
                    threads=threads, progress=progress, fail_on_gaps=fail_on_gaps, fail_on_limits=fail_on_limits, reuse=reuse)
    if out is not None:
        from .report.checker_plots import write_report

        write_report(result, out)
    return result


def sweep(
    target: str | Path,
    *,
    store: Any,
    axes: Any = (),
    samples: int | None = None,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    episodes: int | None = None,
    seed: int | None = None,
    require: float | None = None,
    confidence: float | None = None,
    correction: str | None = None,
    out: str | Path | None = None,
    reuse: bool = True,
    workers: int | None = None,
    address: str | None = None,
    progress: Any = None,
) -> dict[str, Any]:
    """Robustness sweep of a skill or chain over task variants and disturbances; records the valid-for region.

    ``target``: a sweep file, a chain file, or a skill (name, name@N, spec file). ``axes``: extra or
    replacing axes (``"payload_mass=0.2,0.6,1.0"``, ``"actuator_gain=0.5:1.2"`` with ``samples``).
    Returns the JSON-ready result (``schema`` kinetome.sweep/1): per cell the success interval,
    episodes run and pass/fail/unsure mark, the region, the axis ranking; ``reused`` is True when
    the same sweep on the same identities was found stored. With ``out``: sweep.json, sweep.txt and
    the heat map PNG there. Cells run through the execution layer: ``workers`` local Ray worker
    processes, or the Ray cluster at ``address`` (workers get the skills' files, not the store); each cell draws
    only from (seed, cell index), so the result is the same at any worker count.
    """
    from .execution import executor_for
    from .sweep.build import build_spec
    from .sweep.run import run_sweep

    spec = build_spec(target, axes=axes, samples=samples, variant=variant, initial_states=initial_states, episodes=episodes,
                      seed=seed, require=require, confidence=confidence, correction=correction)
    executor = executor_for(workers, address)
    try:
        result = run_sweep(spec, store=store, reuse=reuse, progress=progress, map_fn=executor.map)
    finally:
        executor.close()
    if out is not None:
        from .report.sweep_plots import write_sweep_report

        result = write_sweep_report(result, out)
    return result


def plan_chain(
    *,
    env: str,
    goal: str,
    store: Any,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    max_length: int = 4,
    time_budget: float = 120.0,
    skills: list[str] | None = None,
    begin_with: list[str] | None = None,
    top: int = 3,
    particles: int = 200,
    episodes: int = 200,
    require: float = 0.95,
    confidence: float = 0.95,
    seed: int = 0,
    name: str = "planned-chain",
    threads: int = 1,
    out: str | Path | None = None,
    progress: Any = None,
) -> Any:
    """Search the store for a chain of skills that reaches ``goal`` (a predicate over named state) from the
    initial states, check the ``top`` candidates in simulation and pick the one with the highest lower bound
    of measured whole-chain success (then the shortest). With ``out``, write ``<name>.yaml`` (a chain file for
    ``kinetome check``), the winner's check report (``out/check``) and ``plan.txt``/``plan.json``.

    Returns a ``PlanResult``: ``exit_code`` 0 when a chain was found and passed its check, 1 otherwise
    (``format_text()`` names the closest candidate and its failing handoff); bad input raises
    ``InvalidInputError`` (exit 2). ``result.to_dict()`` is the ``--json`` output (schema kinetome.plan/1).
    """
    from .planning.confirm import ChainSettings
    from .planning.library_problem import PlanTask
    from .planning.plan import run_plan
    from .planning.request import check_plan_inputs
    from .planning.search import SearchSettings

    begin = tuple(begin_with or ())
    check_plan_inputs(max_length=max_length, time_budget=time_budget, top=top, particles=particles, episodes=episodes, require=require,
                      confidence=confidence, seed=seed, name=name, begin_with=begin, variant=variant, initial_states=initial_states)
    task = PlanTask(
        env=env, goal=goal, variant=None if variant is None else Path(variant).resolve(),
        initial_states=None if initial_states is None else Path(initial_states).resolve(), skills=tuple(skills or ()), begin_with=begin,
    )
    return run_plan(
        store, task, search=SearchSettings(max_length=max_length, time_budget_s=float(time_budget), top=top, seed=seed),
        chain=ChainSettings(name=name, require=require, confidence=confidence, episodes=episodes, seed=seed),
        particles=particles, threads=threads, out=out, progress=progress,
    )
@renamed_arguments({"workers": "threads"})
def learn_initiation(ref: str, *, store: Any, **options: Any) -> dict[str, Any]:
    """Run ``ref`` from wide initial states, fit P(success | start state) and propose a ``starts_when``
    with exact precision and recall intervals; ``adopt=True`` stores it as a new version (lineage
    reason ``initiation-learned``). Options and the returned dict: ``library/initiation/learn.py``.
    Raises ``NoRegionFoundError`` (exit 1, nothing stored) when no region meets the precision target."""
    from .initiation.learn import learn_initiation as _learn

    return _learn(ref, store=store, **options)
