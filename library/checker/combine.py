"""One verdict per handoff from every method's evidence, and the whole chain's requirement verdict.

Precedence for a handoff A -> B:
1. a structural mismatch breaks it (``decided_by: static``);
2. with simulation evidence, its verdict (liveness and containment measured
   together); a static counterexample that A's execution reached (the simulation
   refused A's stops on the same clause of B) breaks an otherwise unsure handoff;
3. without it, option models valid for this task decide when they can;
4. otherwise ``unsure``: a containment proof alone never makes a handoff compose.
The entry composes by a static proof over the initial-state box, or by sampling.
"""

from __future__ import annotations

from typing import Any

from .evidence import Counterexample, Evidence, Handoff
from .result import HandoffResult
from .verdict import Verdict

__all__ = ["combine_handoff", "whole_chain_verdict", "reached_clauses"]


def whole_chain_verdict(stats: Any) -> Verdict:
    """Whole chain meets (composes) / fails (breaks) its requirement; unsure without a simulation."""
    return Verdict.UNSURE if stats is None else stats.success.verdict


def reached_clauses(sim: Evidence | None) -> set[str]:
    """Clauses of B's starts_when that the simulation saw refused after A handed over."""
    if sim is None:
        return set()
    return {cl["clause"] for c in sim.counterexamples for cl in c.clauses}


def _promote(static: Evidence, reached: set[str]) -> Evidence:
    """Static candidates become confirmed where the simulation refused states on the same clause."""
    if not static.candidates or not reached:
        return static
    kept, promoted = [], []
    for c in static.candidates:
        if {cl["clause"] for cl in c.clauses} & reached:
            note = c.note + "; confirmed: the simulation refused states on the same clause"
            promoted.append(Counterexample(c.state, c.violations, c.clauses, c.source, True, note))
        else:
            kept.append(c)
    return Evidence(static.method, static.verdict, static.reason, static.estimate, static.counterexamples + tuple(promoted),
                    tuple(kept), static.details, static.points, static.accepted)


def _first(evidence: list[Evidence], method: str) -> Evidence | None:
    return next((e for e in evidence if e.method == method), None)


def _entry(evidence: list[Evidence]) -> tuple[Verdict, str | None, str]:
    static, sampled = _first(evidence, "static"), _first(evidence, "sim")
    if static is not None and static.decided:
        return static.verdict, "static", static.reason
    if sampled is not None:
        return sampled.verdict, ("sim" if sampled.decided else None), sampled.reason
    return Verdict.UNSURE, None, "no method could examine it"


def _handoff(ctx: Any, j: Handoff, evidence: list[Evidence], notes: list[str]) -> tuple[Verdict, str | None, str]:
    static, sim, model = _first(evidence, "static"), _first(evidence, "sim"), _first(evidence, "model")
    containment = (static.details.get("containment") if static is not None else None) or "not examined"
    if sim is not None:
        reached = reached_clauses(sim)
        static_reached = static is not None and any(
            {cl["clause"] for cl in c.clauses} & reached for c in static.counterexamples if c.confirmed
        )
        if containment == "proved" and sim.counterexamples:
            notes.append(
                f"containment was proved under the physical envelope and declared limits, yet {j.target} refused "
                f"{len(sim.counterexamples)}+ handovers: a state left that envelope (check joint limits and the declared limits)"
            )
        if sim.verdict is Verdict.UNSURE and static_reached:
            return Verdict.BREAKS, "static", (
                f"containment fails and {j.source}'s execution reaches the refused region "
                f"(the simulation refused its stops on the same clause); {sim.reason}"
            )
        if containment == "counterexample" and not static_reached:
            notes.append(
                f"contract gap: the solver found a state {j.source} may stop in that {j.target} refuses, "
                f"but {j.source}'s execution never reached it in this simulation"
            )
        return sim.verdict, ("sim" if sim.decided else None), sim.reason
    if model is not None and model.decided:
        return model.verdict, "model", model.reason
    parts = [e.reason for e in (static, model) if e is not None]
    liveness = f"liveness of {j.source} needs simulation or option models valid for this task"
    return Verdict.UNSURE, None, "; ".join(parts + [liveness])


def combine_handoff(ctx: Any, j: Handoff, evidence: list[Evidence]) -> HandoffResult:
    """The verdict of handoff ``j`` from its evidence, following the precedence in the module doc."""
    notes: list[str] = []
    structural = _first(evidence, "structural")
    sim = _first(evidence, "sim")
    evidence = [_promote(e, reached_clauses(sim)) if e.method == "static" and not j.is_entry else e for e in evidence]
    if structural is not None and structural.decided:
        verdict, by, reason = Verdict.BREAKS, "static", f"structural mismatch: {structural.reason}"
    elif j.is_entry:
        verdict, by, reason = _entry(evidence)
    else:
        verdict, by, reason = _handoff(ctx, j, evidence, notes)
    b = ctx.target_skill(j)
    return HandoffResult(
        handoff=j, verdict=verdict, decided_by=by, reason=reason, evidence=tuple(evidence),
        starts_when=b.starts_when, parameters=dict(b.parameters), notes=tuple(notes),
    )
