"""Retrain batch: one skill retrained on K task variants (in parallel through the execution layer),
each child stored with its lineage and promoted by the retrain promotion rule on its own variant.

``train_variant(item)`` is the pure, module-level piece a worker runs: it trains one child and
returns its files and evidence as plain data; storing happens afterwards in this process, in the
order the variants were given, so version numbers do not depend on which worker finished first.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Callable, Sequence

__all__ = ["train_variant", "retrain_batch", "comparison_rows"]


def train_variant(item: dict[str, Any]) -> dict[str, Any]:
    """Train one child of the parent (its files in ``item['parent']``) on ``item['variant']``; the child's
    files, metadata and promotion test.

    Runs with one torch thread wherever it runs (a worker process has one; here it is set for the
    call and restored), so a child's parameters, and its identity, do not depend on the worker count."""
    import torch

    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    try:
        return _train_variant(item)
    finally:
        torch.set_num_threads(threads)


def _train_variant(item: dict[str, Any]) -> dict[str, Any]:
    from kinetome.trainers.curves import save_curves
    from kinetome.trainers.retrain import choose_method

    from ..api import _train_config
    from ..execution.chain_blocks import _rebuild_skill
    from ..tasks import default_rig, load_variant_file
    from .retraining import TaskFiles, run_retrain

    parent = _rebuild_skill(item["parent"], default_rig(item["parent"]["built_for"]))
    folder = Path(item["workdir"])
    parent_task = None
    if item["parent_task"] is not None:  # the variant file the parent was retrained on, as stored with it
        path = folder / "parent-task" / item["parent_task"]["name"]
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(item["parent_task"]["data"])
        parent_task = load_variant_file(path)
    current = {task: _rebuild_skill(entry, default_rig(entry["built_for"])) for task, entry in item["current"].items()}
    draft = run_retrain(
        parent, item["parent_identity"], task=TaskFiles.from_paths(item["variant"], item["initial_states"]),
        config=_train_config(item["config"], item["overrides"]), seed=item["seed"], workdir=folder, parent_task=parent_task,
        from_scratch=item["from_scratch"], workers=1, promotion_episodes=item["promotion_episodes"], current=current,
        method=choose_method(parent.skill.controller.kind, item["method"]),
    )
    csv_path, png_path = save_curves(draft.result.curve, folder, stem="curve", title=f"retrain {parent.ref} on {Path(item['variant']).stem}")
    return {"variant": item["variant"], "parent": parent.ref, "files": dict(draft.files), "meta": draft.meta,
            "promotion": draft.promotion, "env_steps": int(draft.result.steps), "curve_csv": str(csv_path), "curve_png": str(png_path)}


def _skill_entry(store: Any, ref: str) -> dict[str, Any]:
    """A stored version's files, ref and env, rebuilt in a worker (workers never open the store)."""
    import json as _json

    from ..execution.chain_blocks import skill_files
    from ..runtime.files import SPEC_FILE
    from ..runtime.skill import load_skill

    version = store.get(ref)
    env = _json.loads(store.read_file(version, SPEC_FILE).decode("utf-8"))["env"]
    return {"ref": version.ref, "files": skill_files(load_skill(store, version.ref)), "built_for": env}


def _parent_entry(store: Any, ref: str, variant_name: str) -> dict[str, Any]:
    """What a worker needs of the parent: its files, identity and own task, and the versions current for the
    variant and nominal (the child is tested against those)."""
    import json as _json

    from .retraining import current_versions
    from .roles import RECORD_FILE, VARIANT_FILE

    version = store.get(ref)
    task = None
    if VARIANT_FILE in version.roles:
        record = _json.loads(store.read_file(version, RECORD_FILE)) if RECORD_FILE in version.roles else {}
        name = Path((record.get("variant") or {}).get("file") or VARIANT_FILE).name
        task = {"name": name, "data": store.read_file(version, VARIANT_FILE)}
    current = {task_name: _skill_entry(store, cur) for task_name, cur in current_versions(store, version.ref, [variant_name, "nominal"]).items()
               if cur != version.ref}
    return {"parent": _skill_entry(store, version.ref), "parent_identity": version.identity, "parent_task": task, "current": current}


def _items(ref: str, store: Any, variants: Sequence[Path], *, out: Path, common: dict[str, Any]) -> list[dict[str, Any]]:
    """One plain-data item per variant (a bare ``ref`` resolves to the current version for each variant)."""
    from ..api import resolve
    from ..errors import InvalidInputError
    from ..tasks import load_variant_file

    loaded = [load_variant_file(v) for v in variants]
    names = [v.name for v in loaded]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise InvalidInputError(f"--variants: each variant must have its own name (a child becomes current per variant name), "
                                f"got {', '.join(twice)} more than once; give each variant file a distinct name:")
    return [{**common, **_parent_entry(store, resolve(ref, store=store, variant=tv), tv.name), "variant": str(path.resolve()),
             "workdir": str((out / tv.name).resolve())} for path, tv in zip(variants, loaded)]


def comparison_rows(children: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """Per child: success on its own variant and on nominal, beside its parent's, and where it became current."""
    from .view import _compared_text, counts_text

    rows = []
    for c in children:
        by_role = {role: row for row in c["promotion"]["tasks"] for role in row["roles"]}
        own, nominal = by_role["trained"], by_role["nominal"]
        rows.append({
            "variant": own["task"], "child": c["child"], "parent": c["parent"],
            "own_child": counts_text(own["child"]), "own_parent": counts_text(own["parent"]), "own_bound": f"{own['lower_bound']:+.3f}",
            "nominal_child": counts_text(nominal["child"]), "nominal_parent": counts_text(nominal["parent"]),
            "nominal_compared": _compared_text(nominal, c["parent"]), "nominal_bound": f"{nominal['lower_bound']:+.3f}", "current_for": ", ".join(c["current_for"]) or "-",
        })
    return rows


def _batch_folder(ref: str, out: str | Path | None) -> Path:
    """``--out``, which must not hold an earlier batch's checkpoints (a batch is not resumed), else a new run folder
    ``kinetome-retrain/<name>-<N>-batch/run-<K>``, so the same batch can run again."""
    from ..errors import InvalidInputError
    from ..retrain_runs import DEFAULT_ROOT, claim_run_folder

    if out is None:
        return claim_run_folder(DEFAULT_ROOT / f"{ref.replace('@', '-')}-batch")
    held = sorted(p.parent.name for p in Path(out).glob("*/checkpoints") if any(p.iterdir()))
    if held:
        raise InvalidInputError(f"--out {out} already holds checkpoints of an earlier batch ({', '.join(held)}); a batch is not "
                                "resumed: choose an empty folder, or leave out --out for a new run folder")
    return Path(out)


def retrain_batch(
    ref: str, *, store: Any, variants: Sequence[str | Path], initial_states: str | Path | None = None, config: str | Path | None = None,
    env_step_budget: int | None = None, seed: int = 0, from_scratch: bool = False, method: str = "auto",
    promotion_episodes: int | None = None, refit_episodes: int = 200, workers: int | None = None, address: str | None = None,
    out: str | Path | None = None, on_start: Callable[[int], None] | None = None,
) -> dict[str, Any]:
    """Retrain ``ref`` on every variant; store the children in the order given and apply the promotion rule per variant.

    ``on_start(n)`` is called once every input has been validated, just before the ``n`` trainings start.
    """
    from ..api import fit
    from ..execution import executor_for
    from ..output_schema import tagged
    from ..safety import caution_for
    from ..stored_meta import current_meta
    from ..tasks import default_rig
    from .promotion import DEFAULT_EPISODES
    from .retraining import apply_promotion

    folder = _batch_folder(ref, out)
    common = {"initial_states": None if initial_states is None else str(Path(initial_states).resolve()),
              "config": None if config is None else str(Path(config).resolve()), "overrides": {"env_step_budget": env_step_budget},
              "seed": int(seed), "from_scratch": bool(from_scratch), "method": method,
              "promotion_episodes": int(promotion_episodes or DEFAULT_EPISODES)}
    items = _items(ref, store, [Path(v) for v in variants], out=folder, common=common)
    executor = executor_for(workers, address)
    if on_start is not None:
        on_start(len(items))
    try:
        trained = executor.map(train_variant, items)
    finally:
        executor.close()
    children = []
    for item, res in zip(items, trained):
        version = store.get(res["parent"])
        added = store.add(version.name, res["files"], parent=res["parent"], reason="retrained", meta=current_meta(res["meta"]))
        child = added.version.ref
        current_for = apply_promotion(store, child, res["promotion"]) if added.is_new else store.current_tasks(child)
        fitted = fit(child, store=store, episodes=refit_episodes, variant=item["variant"], initial_states=initial_states, seed=seed) if refit_episodes else None
        passed_but_taken = [t for t in res["promotion"]["current_for"] if added.is_new and t not in current_for]
        children.append({"variant": item["variant"], "parent": res["parent"], "child": child, "is_new": added.is_new,
                         "passed_but_taken": passed_but_taken,
                         "promotion": res["promotion"], "current_for": current_for, "env_steps": res["env_steps"],
                         "trainer": res["meta"]["trainer"], "curve_png": res["curve_png"], "models": None if fitted is None else fitted["model_ref"],
                         "lineage": [v.ref for v in store.lineage(child)]})
    env = store.get(children[0]["child"]).meta.get("env")
    return tagged("retrain-batch", {"skill": ref, "children": children, "comparison": comparison_rows(children),
                                    "workers": getattr(executor, "where", "this process"), "caution": caution_for(default_rig(env) if env else None)})
