"""``api.learn_initiation``: sample a stored skill from wide initial states, propose a ``starts_when``,
store the evidence as an artifact and, when asked, adopt it as a new version.

Stored on success only: an ``initiation-proposal`` artifact of the version measured (``result.json``:
everything printed; ``samples.safetensors``: start states, outcomes, split of every episode). With
``adopt``, a child version whose spec differs only in ``starts_when`` (lineage reason
``initiation-learned``; every other file as the parent's), the same artifact attached to it, and
the child made current for the task it was learned on. When no region meets the target, nothing is
stored and ``NoRegionFoundError`` (exit 1) says why.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InvalidInputError, NoRegionFoundError

__all__ = ["learn_initiation", "ARTIFACT_KIND", "RESULT_FILE", "SAMPLES_FILE", "DEFAULT_EPISODES", "read_samples"]

ARTIFACT_KIND = "initiation-proposal"
RESULT_FILE = "result.json"
SAMPLES_FILE = "samples.safetensors"
DEFAULT_EPISODES = 3000
SPLIT_CODES = {"fit": 0, "choose": 1, "report": 2}


def _check(episodes: int, precision: float, confidence: float, max_clauses: int, threads: int = 1) -> None:
    problems = []
    if not isinstance(threads, int) or threads < 1:
        problems.append(f"--threads must be >= 1 (MuJoCo threads in this process), got {threads}; e.g. --threads 1")
    if episodes < 100:
        problems.append(f"--episodes must be >= 100 (three splits of the episodes), got {episodes}")
    if not 0.0 < precision < 1.0:
        problems.append(f"--precision must be in (0, 1), got {precision}; e.g. 0.95")
    if not 0.0 < confidence < 1.0:
        problems.append(f"--confidence must be in (0, 1), got {confidence}; e.g. 0.95")
    if not 1 <= max_clauses <= 8:
        problems.append(f"--max-clauses must be between 1 and 8, got {max_clauses}")
    if problems:
        raise InvalidInputError(problems)


def _samples_bytes(samples: Any, splits: Any) -> bytes:
    from safetensors.numpy import save

    split = np.zeros(samples.success.size, dtype=np.int8)
    split[splits.choose], split[splits.report] = SPLIT_CODES["choose"], SPLIT_CODES["report"]
    arrays = {f"start.{k}": np.ascontiguousarray(v) for k, v in samples.starts.items()}
    arrays.update(outcome=samples.outcome.astype(np.int8), success=samples.success.astype(np.int8), split=split)
    return save(dict(sorted(arrays.items())))


def read_samples(data: bytes) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray]:
    """(start states, success (n,) bool, split (n,) int8: 0 fit, 1 choose, 2 report) from ``samples.safetensors``."""
    from safetensors.numpy import load

    arrays = load(data)
    starts = {k.removeprefix("start."): v for k, v in arrays.items() if k.startswith("start.")}
    return starts, arrays["success"].astype(bool), arrays["split"]


def adopted_starts_when(proposed: Any, current: Any) -> tuple[str, list[str]]:
    """The proposal conjoined with every clause of ``current`` over quantities the proposal does not name.

    Why: the proposal constrains only the quantities it learned about; dropping the hand-written
    clauses on the others would admit states far outside the sample. Returns (text, kept clauses).
    """
    if current is None:
        return str(proposed), []
    kept = [c for c in current.clauses() if not (c.names & proposed.names)]
    return str(type(proposed).conjunction([proposed, *kept])), [str(c) for c in kept]


def _adopt(store: Any, version: Any, text: str, result: dict[str, Any], task: str) -> dict[str, Any]:
    """Store the proposal as a child version (reason ``initiation-learned``) and make it current for ``task``."""
    from ..runtime.files import SPEC_FILE
    from ..spec import canonical_json, skill_from_document, skill_to_document

    doc = json.loads(store.read_file(version, SPEC_FILE).decode("utf-8"))
    doc["starts_when"] = text
    skill = skill_from_document(doc)
    files = {role: store.read_file(version, role) for role in version.roles}
    files[SPEC_FILE] = canonical_json(skill_to_document(skill))
    meta = {**version.meta, "initiation": {"starts_when": text, "previous": result["current"]["starts_when"] if result["current"] else None,
                                           "precision": result["precision"], "recall": result["recall"],
                                           "precision_target": result["precision_target"], "episodes": result["episodes"]}}
    added = store.add(skill.name, files, parent=version.ref, reason="initiation-learned", meta=meta)
    child = added.version.ref
    p = result["precision"]
    why = (f"initiation learned from {result['episodes']} episodes: precision {p['successes']}/{p['episodes']}, "
           f"lower bound {p['interval'][0]:.3f} >= {result['precision_target']}")
    store.promote(child, task=task, reason="promoted", evidence={"why": why})
    return {"version": child, "is_new": added.is_new, "current_for": task}


def learn_initiation(
    ref: str,
    *,
    store: Any,
    variant: str | Path | None = None,
    initial_states: str | Path | None = None,
    widen: list[str] | None = None,
    episodes: int = DEFAULT_EPISODES,
    seed: int = 0,
    precision: float = 0.95,
    confidence: float = 0.95,
    max_clauses: int = 4,
    adopt: bool = False,
    out: str | Path | None = None,
    threads: int = 1,
    progress: Any = None,
) -> dict[str, Any]:
    """Learn where ``ref`` succeeds and propose a ``starts_when`` (see the module docstring)."""
    from ..api import load, model_task, resolve
    from ..initial_states import initial_states_for
    from ..output_schema import tagged
    from ..provenance import software_versions
    from ..safety import caution_for
    from ..tasks import load_variant_file, task_rig
    from .propose import propose
    from .sampling import DEFAULT_WIDENING, parse_widening, sample_outcomes

    _check(episodes, precision, confidence, max_clauses, threads)
    widening = parse_widening(widen if widen is not None else ([] if initial_states is not None else list(DEFAULT_WIDENING)))
    task_variant = load_variant_file(variant)
    version = store.get(resolve(ref, store=store, variant=task_variant))
    rig = task_rig(version_env(store, version), task_variant)
    loaded = load(version.ref, store=store, rig=rig)
    start = initial_states_for(loaded.skill, initial_states)
    samples = sample_outcomes(loaded, rig, start=start, widening=widening, episodes=episodes, seed=seed, workers=threads, progress=progress)
    at_rest = [q.name for q in rig.layout.quantities if "/s" in q.unit]
    proposal = propose(samples.starts, samples.success, seed=seed, precision=precision, confidence=confidence, max_clauses=max_clauses,
                       at_rest=at_rest, current=loaded.starts_when, parameters=loaded.parameters,
                       support_quantities=[q for q, _, _ in widening.items] or None)
    result = {
        "skill": version.ref, "env": rig.env_id, "variant": None if variant is None else str(variant),
        "initial_states": str(initial_states) if initial_states is not None else ("the skill's usual initial states" if start is not None else "the env's default"),
        "widening": widening.to_list(), "widening_text": widening.describe(), "episodes": episodes, "seed": seed,
        "successes": int(samples.success.sum()), "outcomes": samples.outcome_counts(), **proposal.to_dict(),
        "artifact": None, "adopted": None, "caution": caution_for(rig),
    }
    if proposal.text is None:
        raise NoRegionFoundError(f"no region found for {version.ref}: {proposal.why_none} "
                                 f"({result['successes']} of {episodes} episodes stopped by stops_when); nothing stored")
    settings = {"episodes": episodes, "seed": seed, "widening": widening.to_list(), "initial_states": result["initial_states"],
                "precision": precision, "confidence": confidence, "max_clauses": max_clauses}
    files = {RESULT_FILE: json.dumps(result, sort_keys=True, default=_plain).encode("utf-8"), SAMPLES_FILE: _samples_bytes(samples, proposal.splits)}
    record = store.attach_artifact(version.ref, ARTIFACT_KIND, files, task=model_task(rig), settings=settings, software=software_versions())
    result["artifact"] = record.ref
    if adopt:
        from .propose import _measured

        proposed, _, _ = _measured(proposal.text, samples.starts, loaded.parameters, samples.success, proposal.splits, confidence)
        text, kept = adopted_starts_when(proposed, loaded.starts_when)
        result["adopted"] = _adopt(store, version, text, result, getattr(task_variant, "name", "nominal"))
        result["adopted"].update({"starts_when": text, "kept": kept})
        store.attach_artifact(result["adopted"]["version"], ARTIFACT_KIND, files, computed_on=[version.identity], task=model_task(rig),
                              settings=settings, software=software_versions())
    if out is not None:
        result["plot"] = str(_write_out(out, result, samples, proposal, loaded))
    return tagged("learn-initiation", result)


def version_env(store: Any, version: Any) -> str:
    """The env a stored version runs on (from its spec)."""
    from ..runtime.files import SPEC_FILE

    return json.loads(store.read_file(version, SPEC_FILE).decode("utf-8"))["env"]


def _plain(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def _write_out(out: str | Path, result: dict, samples: Any, proposal: Any, loaded: Any) -> Path:
    from ..report.initiation_plot import plot_initiation

    folder = Path(out)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / RESULT_FILE).write_text(json.dumps(result, indent=2, sort_keys=True, default=_plain) + "\n", encoding="utf-8")
    return plot_initiation(samples.starts, samples.success, proposal.axes, loaded, proposal.text, folder / "initiation.png",
                           title=f"{result['skill']}: learned vs hand-written starts_when")
