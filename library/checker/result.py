"""The outcome of a chain check: per-handoff verdicts with evidence, whole-chain stats, text and JSON."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..safety import CAUTION
from .chain import Chain
from .chain_stats import ChainStats
from .evidence import Counterexample, Evidence, Handoff
from .verdict import Estimate, Verdict, exit_code_for

__all__ = ["HandoffResult", "CheckResult", "SCHEMA", "EXIT_TEXT"]

SCHEMA = "kinetome.check/1"
EXIT_TEXT = {
    0: "every handoff composes and the whole chain meets its requirement",
    1: "a handoff breaks or the whole chain fails its requirement",
    3: "unsure: more evidence is needed",
}
_PREFERRED = ("sim", "model")  # which estimate to show for an undecided handoff


@dataclass(frozen=True, eq=False)
class HandoffResult:
    """Verdict on the entry or on one handoff A -> B and the evidence behind it.

    ``decided_by`` names the method whose evidence gave the verdict (None when
    unsure). ``starts_when``/``parameters`` are B's, kept for plots.
    """

    handoff: Handoff
    verdict: Verdict
    decided_by: str | None
    reason: str
    evidence: tuple[Evidence, ...]
    starts_when: Any = None
    parameters: Mapping[str, np.ndarray] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    premise_checks: tuple[Any, ...] = ()  # premises.PremiseCheck of a containment proof
    gaps: tuple[Mapping[str, Any], ...] = ()  # contract gaps: state, violation, clause, reached, fix

    @property
    def index(self) -> int:
        return self.handoff.index

    @property
    def label(self) -> str:
        return self.handoff.label

    def evidence_of(self, method: str) -> Evidence | None:
        for ev in self.evidence:
            if ev.method == method:
                return ev
        return None

    @property
    def methods(self) -> tuple[str, ...]:
        return tuple(ev.method for ev in self.evidence)

    @property
    def estimate(self) -> Estimate | None:
        """Counts and interval behind the verdict (or the best available for an unsure one)."""
        if self.decided_by is not None:
            ev = self.evidence_of(self.decided_by)
            if ev is not None and ev.estimate is not None:
                return ev.estimate
        for m in _PREFERRED:
            ev = self.evidence_of(m)
            if ev is not None and ev.estimate is not None:
                return ev.estimate
        return None

    @property
    def counterexamples(self) -> tuple[Counterexample, ...]:
        """Up to 5 states B refused: confirmed ones first (deciding method first), then candidates."""
        order = [self.decided_by] + [ev.method for ev in self.evidence if ev.method != self.decided_by]
        confirmed: list[Counterexample] = []
        candidates: list[Counterexample] = []
        for m in order:
            ev = self.evidence_of(m) if m else None
            if ev is None:
                continue
            confirmed += [c for c in ev.counterexamples if c.confirmed]
            candidates += [c for c in ev.counterexamples if not c.confirmed] + list(ev.candidates)
        return tuple((confirmed + candidates)[:5])

    @property
    def timeouts(self) -> str:
        """Timeouts of A: measured counts when simulated (``+`` where allowed), else unknown."""
        sim = self.evidence_of("sim")
        if sim is not None and "timed_out" in sim.details:
            d = sim.details
            return f"{d['timed_out']}/{d['source_ran']}" + (" allowed" if d.get("may_time_out") else "")
        return "-" if self.handoff.is_entry else "not measured"

    @property
    def points(self) -> tuple[Mapping[str, np.ndarray] | None, np.ndarray | None, str]:
        """End states of A for plots (and acceptance flags), from the richest method that has them."""
        for m in _PREFERRED:
            ev = self.evidence_of(m)
            if ev is not None and ev.points is not None:
                return ev.points, ev.accepted, m
        cex = tuple(c for c in self.counterexamples if c.confirmed) or self.counterexamples
        if cex:
            names = sorted(set.intersection(*[set(c.state) for c in cex]))
            pts = {n: np.asarray([c.state[n] for c in cex], dtype=np.float64) for n in names}
            return pts, np.zeros(len(cex), dtype=bool), "z3"
        return None, None, ""

    def to_dict(self) -> dict[str, Any]:
        est = self.estimate
        return {
            "index": self.index,
            "kind": "entry" if self.handoff.is_entry else "handoff",
            "single_start": bool(est is not None and est.single_start),
            "from": self.handoff.source,
            "to": self.handoff.target,
            "verdict": self.verdict.value,
            "decided_by": self.decided_by,
            "reason": self.reason,
            "estimate": None if est is None else est.to_dict(),
            "timeouts": self.timeouts,
            "counterexamples": [c.to_dict() for c in self.counterexamples],
            "evidence": [ev.to_dict() for ev in self.evidence],
            "starts_when": None if self.starts_when is None else str(self.starts_when),
            "notes": list(self.notes),
            "proof_premises": [c.to_dict() for c in self.premise_checks],
            "contract_gaps": [dict(g) for g in self.gaps],
        }


STATISTICS = {
    "composes": "one-sided exact (Clopper-Pearson) lower bound, at the chain's confidence, on handing over at every "
    "handoff up to this one; it bounds each handoff's own probability, and the nested claims need no correction",
    "breaks": "one-sided exact upper bound on the handoff's own probability at 1 - alpha/m (Bonferroni over the m handoffs, entry included)",
    "whole_chain": "one-sided exact bounds at the chain's confidence against require.chain",
    "trials": "only distinct trajectories count; one distinct trajectory is one trial (a single-start verdict, no bound)",
}


def _json_default(x: Any) -> Any:
    if isinstance(x, np.generic):
        return x.item()
    if isinstance(x, np.ndarray):
        return x.tolist()
    if isinstance(x, (set, frozenset, tuple)):
        return list(x)
    return str(x)


def _finite_or_none(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _finite_or_none(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_finite_or_none(v) for v in x]
    return x


@dataclass(frozen=True, eq=False)
class CheckResult:
    """Everything a chain check found. ``checked[0]`` is the entry; the rest are the handoffs.

    ``whole_chain`` holds the simulation's whole-chain numbers (None without a
    simulation) and ``chain_verdict`` whether the chain meets its requirement
    (``composes``), fails it (``breaks``) or cannot tell (``unsure``).
    """

    chain: Chain
    method: str
    all_handoffs: tuple[HandoffResult, ...]
    whole_chain: ChainStats | None = None
    chain_verdict: Verdict = Verdict.UNSURE
    model_chain: Estimate | None = None  # whole-chain success from option models, when no simulation ran
    notes: tuple[str, ...] = ()
    timings: Mapping[str, float] = field(default_factory=dict)
    env_id: str = ""
    variant: str = ""
    initial_states: str = ""
    episodes: int = 0
    seed: int = 0
    layout: Any = None  # the rig's StateLayout, for plots
    caution: str = CAUTION  # safety.caution_for(the chain's robot)
    stored: Mapping[str, Any] | None = None  # where this result was kept for reuse (``reuse.py``), if it was
    reused: bool = field(default=False, init=False)  # a fresh result; ``reuse.StoredCheck`` is the reused kind

    def __post_init__(self) -> None:
        if not self.all_handoffs or not self.all_handoffs[0].handoff.is_entry:
            raise ValueError("a check result needs the entry first")

    @property
    def entry(self) -> HandoffResult:
        return self.all_handoffs[0]

    @property
    def handoffs(self) -> tuple[HandoffResult, ...]:
        return self.all_handoffs[1:]

    @property
    def verdicts(self) -> tuple[Verdict, ...]:
        return tuple(j.verdict for j in self.all_handoffs)

    @property
    def exit_code(self) -> int:
        """0: every handoff composes and the whole chain meets its requirement; 1: something
        breaks or the chain fails its requirement; 3: unsure (2, bad input, is raised before a result exists)."""
        return exit_code_for([*self.verdicts, self.chain_verdict])

    @property
    def methods_used(self) -> tuple[str, ...]:
        seen: list[str] = []
        for j in self.all_handoffs:
            for m in j.methods:
                if m not in seen:
                    seen.append(m)
        return tuple(seen)

    # -- JSON ---------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready value (plain types only): what ``--json`` prints and what a store may keep."""
        c = self.chain
        body = {
            "schema": SCHEMA,
            "chain": c.to_dict(),
            "task": {"env": self.env_id, "variant": self.variant or None, "initial_states": self.initial_states or None},
            "method": self.method,
            "methods_used": list(self.methods_used),
            "episodes": self.episodes,
            "seed": self.seed,
            "require": {"handoff": c.require_handoff, "chain": c.chain_requirement},
            "confidence": c.confidence,
            "exit_code": self.exit_code,
            "summary": EXIT_TEXT[self.exit_code],
            "handoff_count": len(self.handoffs),
            "handoffs": [j.to_dict() for j in self.all_handoffs],
            "whole_chain": None if self.whole_chain is None else self.whole_chain.to_dict(),
            "chain_verdict": self.chain_verdict.value,
            "model_chain": None if self.model_chain is None else self.model_chain.to_dict(),
            "statistics": STATISTICS,
            "notes": list(self.notes),
            "timings_s": dict(self.timings),
            "caution": self.caution,
            "stored": None if self.stored is None else dict(self.stored),
        }
        return _finite_or_none(json.loads(json.dumps(body, default=_json_default)))

    def to_json(self, *, indent: int | None = 2) -> str:
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False)

    # -- text ---------------------------------------------------------------------
    def format_text(self, *, width: int = 100) -> str:
        from .text import format_result

        return format_result(self, width=width)

    def __str__(self) -> str:
        return self.format_text()
