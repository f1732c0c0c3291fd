"""Stored check results: what a check is found again by, and a stored result read back.

A check's result is kept as an artifact of its first skill's version (kind
``check-result``), computed on the content identities of every skill in order.
It is found again only when all of these are the same: the skills' identities,
the task (env, variant digest, initial states' digest), every setting that can
change a verdict (requirements, confidence, method, episodes, seed, samples,
disturbances, flags, the option models the model method may use, the notes
found before running, such as valid-for warnings from stored sweeps) and the
software (MuJoCo, gymnasium, numpy, torch, SciPy, z3, Python, platform, and
kinetome's version and commit). Anything else re-runs. Skills given as spec
files have no identity, so such a chain is neither stored nor reused.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from .verdict import Verdict

__all__ = ["KIND", "TEXT_FILE", "CheckKey", "StoredCheck", "StoredHandoff", "check_key", "find_stored", "store_check", "stored_about"]

KIND = "check-result"
TEXT_FILE = "summary.txt"
_MODEL_METHODS = ("auto", "model")


@dataclass(frozen=True)
class CheckKey:
    """The identities, task, settings and software a check result is stored and found under."""

    refs: tuple[str, ...]  # version refs name@N, in chain order
    task: Mapping[str, Any]
    settings: Mapping[str, Any]
    software: Mapping[str, Any]


def _initial_states_digest(initial: Any) -> str | None:
    if initial is None:
        return None
    if isinstance(initial, Path):
        return hashlib.sha256(initial.read_bytes()).hexdigest()
    from ..store.metadata import canonical_json

    return hashlib.sha256(canonical_json(dict(initial)).encode("utf-8")).hexdigest()


def _model_digests(store: Any, refs: tuple[str, ...]) -> list[list[str]]:
    """Digests of every option-model revision of each skill: a new fit changes the key."""
    from ..api import MODEL_KIND

    return [[a.digest for a in store.artifacts(ref, kind=MODEL_KIND, all_revisions=True)] for ref in refs]


def _software() -> dict[str, Any]:
    from ..provenance import code_version, software_versions

    code = code_version()
    return {**software_versions(), "kinetome": code["kinetome"], "kinetome_commit": code["git_commit"]}


def check_key(ctx: Any) -> CheckKey | None:
    """The key of this check, or None when it cannot be stored (no store, or a skill from a spec file)."""
    if ctx.store is None or any(s.ref.endswith((".yaml", ".yml")) for s in ctx.skills):
        return None
    c, o = ctx.chain, ctx.options
    refs = tuple(s.ref for s in ctx.skills)
    variant = ctx.rig.variant
    task = {
        "env": ctx.rig.env_id,
        "variant": getattr(variant, "name", None),
        "variant_digest": getattr(variant, "digest", None),
        "initial_states_digest": _initial_states_digest(c.initial_states),
    }
    settings = {
        "chain": c.name,
        "may_time_out": list(c.may_time_out),
        "require": {"handoff": c.require_handoff, "chain": c.chain_requirement},
        "confidence": c.confidence,
        "disturbances": c.disturbances.to_dict(),
        "command_jump": c.command_jump,
        "method": o.method,
        "episodes": ctx.episodes,
        "seed": ctx.seed,
        "gamma": o.gamma,
        "timeout_ms": o.timeout_ms,
        "start_samples": o.start_samples,
        "model_samples": o.model_samples,
        "max_counterexamples": o.max_counterexamples,
        "block_size": o.block_size,
        "fail_on_gaps": o.fail_on_gaps,
        "fail_on_limits": o.fail_on_limits,
        "option_models": _model_digests(ctx.store, refs) if o.method in _MODEL_METHODS else None,
        "notes_before_run": list(ctx.notes),  # e.g. the valid-for warnings of stored sweeps
    }
    return CheckKey(refs, task, settings, _software())


def _about(artifact: Any, reused: bool) -> dict[str, Any]:
    return {"reused": reused, "artifact": artifact.ref, "digest": artifact.digest, "created_at": artifact.created_at}


@dataclass(frozen=True)
class StoredHandoff:
    """One row of a stored result: enough to read its verdict without the evidence behind it."""

    index: int
    label: str
    verdict: Verdict
    decided_by: str | None
    reason: str


@dataclass(frozen=True)
class StoredCheck:
    """A check result read back from the store instead of computed again (``reused`` is True).

    It offers what callers of a fresh ``CheckResult`` read: ``exit_code``, verdicts,
    ``to_dict``/``to_json`` (with ``stored.reused`` true) and ``format_text`` (the text
    first printed, with a line saying it was reused). Plots are not kept.
    """

    data: Mapping[str, Any]
    text: str
    artifact: Any  # ArtifactRecord
    reused: bool = True

    @property
    def exit_code(self) -> int:
        return int(self.data["exit_code"])

    @property
    def all_handoffs(self) -> tuple[StoredHandoff, ...]:
        return tuple(
            StoredHandoff(h["index"], f"{h['from']} -> {h['to']}", Verdict(h["verdict"]), h["decided_by"], h["reason"])
            for h in self.data["handoffs"]
        )

    @property
    def handoffs(self) -> tuple[StoredHandoff, ...]:
        return self.all_handoffs[1:]

    @property
    def verdicts(self) -> tuple[Verdict, ...]:
        return tuple(h.verdict for h in self.all_handoffs)

    @property
    def chain_verdict(self) -> Verdict:
        return Verdict(self.data["chain_verdict"])

    def reuse_line(self) -> str:
        return (
            f"reused: the stored result {self.artifact.ref} ({self.artifact.created_at}) of this check: same skill "
            f"identities, task, settings and software, so nothing was simulated again (--fresh re-runs it)"
        )

    def to_dict(self) -> dict[str, Any]:
        return {**self.data, "stored": _about(self.artifact, True)}

    def to_json(self, *, indent: int | None = 2) -> str:
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False)

    def format_text(self, *, width: int = 100) -> str:
        return self.reuse_line() + "\n\n" + self.text

    def __str__(self) -> str:
        return self.format_text()


def find_stored(store: Any, key: CheckKey) -> StoredCheck | None:
    """The stored result of this exact check, or None."""
    from ..evidence import find_check_result

    found = find_check_result(store, key.refs, task=key.task, settings=key.settings, software=key.software)
    if found is None or TEXT_FILE not in found.artifact.roles:
        return None
    text = store.read_artifact(found.artifact, TEXT_FILE).decode("utf-8")
    return StoredCheck(found.result, text, found.artifact)


def store_check(store: Any, key: CheckKey, result: Any) -> Any:
    """Keep ``result`` (a CheckResult) for reuse; returns the ArtifactRecord."""
    from ..evidence import store_check_result

    summary = f"{result.chain.name}: exit code {result.exit_code}"
    return store_check_result(
        store, key.refs, task=key.task, settings=key.settings, software=key.software,
        result=result.to_dict(), meta={"summary": summary}, extra_files={TEXT_FILE: result.format_text().encode("utf-8")},
    )


def stored_about(artifact: Any) -> dict[str, Any]:
    """The ``stored`` field of a fresh result that was just kept."""
    return _about(artifact, False)
