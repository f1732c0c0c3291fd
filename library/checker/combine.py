"""One verdict per handoff from every method's evidence, and the whole chain's requirement verdict.

Precedence for a handoff A -> B:
1. a structural mismatch breaks it (``decided_by: static``);
2. with simulation evidence, its verdict (liveness and containment measured
   together); a static counterexample that A's execution reached (the simulation
   refused A's stops on the same clause of B) breaks an otherwise unsure handoff;
3. without it, option models valid for this task decide when they can;
4. otherwise ``unsure``: a containment proof alone never makes a handoff compose.
A realised solver state that A's execution never reached is a *contract gap*: a note
with the state, the clause and a fix, and ``breaks`` only with ``fail_on_gaps``.
With ``fail_on_limits``, a declared limit of A exceeded in simulation, or a command
jump at the switch above ``handoff_limits.command_jump``, breaks the handoff.
The entry composes by a static proof over the initial-state box, or by sampling.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..safety import PROOF_SCOPE
from .evidence import Counterexample, Evidence, Handoff
from .premises import PremiseCheck, check_premises
from .result import HandoffResult
from .verdict import Verdict

__all__ = ["combine_handoff", "whole_chain_verdict", "reached_clauses"]


def whole_chain_verdict(stats: Any, model_chain: Any = None) -> Verdict:
    """Whole chain meets (composes) / fails (breaks) its requirement: from the simulation, else from
    option models valid for this task; unsure with neither."""
    if stats is not None:
        return stats.success.verdict
    return Verdict.UNSURE if model_chain is None else model_chain.verdict


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


def _stop_states(ctx: Any, j: Handoff) -> dict[str, np.ndarray] | None:
    """A's end states where it stopped, in this check's simulation (None: no simulation ran)."""
    from ..runtime.records import EndReason

    sim = ctx.cache.get("simulation")
    if sim is None:
        return None
    seg = sim.rollout.segments[j.index - 1]
    rows = np.flatnonzero(seg.reason == int(EndReason.STOPPED))
    return {k: np.asarray(v)[rows] for k, v in seg.end_state.items() if not k.endswith("_jac")}


def _premise_notes(ctx: Any, j: Handoff, static: Evidence | None, notes: list[str]) -> tuple[list[PremiseCheck], bool]:
    """Check a containment proof's premises on the simulation; (checks, whether the proof stands)."""
    if static is None or static.details.get("containment") != "proved":
        return [], False
    checks = check_premises(static.premises, _stop_states(ctx, j))
    used = "; ".join(c.text() for c in checks) or f"no premise ({j.source}'s stops_when alone implies {j.target}'s starts_when)"
    notes.append(f"containment proof ({PROOF_SCOPE}) used: {used}")
    void = [c for c in checks if c.status == "exceeded"]
    for c in void:
        notes.append(f"proof void: {c.label} is exceeded in this chain's simulation (worst {c.worst})")
    return checks, not void and all(c.status != "unchecked" for c in checks)


def _gaps(ctx: Any, j: Handoff, static: Evidence, reached: bool | None) -> list[dict[str, Any]]:
    """Realised solver states A may stop in that B refuses, each with its clause and a fix."""
    out = []
    for c in (x for x in static.counterexamples if x.confirmed):
        clause = c.clauses[0]["clause"] if c.clauses else "?"
        out.append({
            "state": dict(c.state),
            "violation": "; ".join(c.violations),
            "clause": clause,
            "reached": reached,
            "fix": f"tighten {j.source}'s stops_when (e.g. add `{clause}`) or loosen {j.target}'s starts_when",
        })
    return out[: ctx.options.max_counterexamples]


def _gap_note(j: Handoff, gaps: list[dict[str, Any]], simulated: bool) -> str:
    where = "never reached it in this chain's simulation" if simulated else "may or may not reach it (no simulation ran)"
    first = gaps[0]
    return (
        f"contract gap: {len(gaps)} state(s) {j.source} may stop in that {j.target} refuses, realised in MuJoCo; "
        f"{j.source}'s execution {where}. First: {first['violation']}. Fix: {first['fix']}"
    )


def _limit_failure(ctx: Any, sim: Evidence) -> str | None:
    """Why --fail-on-limits breaks this handoff, or None."""
    over = [f"{x['limit']} reached {x['worst']:.4g} {x['unit']} (declared {x['declared']:g})" for x in sim.details.get("limits", []) if x["exceeded"]]
    jump, bound = sim.details.get("command_jump"), ctx.chain.command_jump
    if jump is not None and bound is not None and jump["max"] > bound:
        over.append(f"the command jumps by up to {jump['max']:.4g} at the switch (handoff_limits.command_jump {bound:g})")
    return "; ".join(over) or None


def _with_sim(ctx: Any, j: Handoff, static: Evidence | None, sim: Evidence, notes: list[str], gaps: list) -> tuple[Verdict, str | None, str]:
    containment = (static.details.get("containment") if static is not None else None) or "not examined"
    reached = reached_clauses(sim)
    static_reached = static is not None and any({cl["clause"] for cl in c.clauses} & reached for c in static.counterexamples if c.confirmed)
    if containment == "proved" and sim.counterexamples and not any(n.startswith("proof void") for n in notes):
        notes.append(
            f"containment was proved under the physical envelope and declared limits, yet {j.target} refused "
            f"{len(sim.counterexamples)}+ handovers: a state left that envelope (check joint limits and the declared limits)"
        )
    if containment == "counterexample" and not static_reached:
        gaps += _gaps(ctx, j, static, False)
        notes.append(_gap_note(j, gaps, True))
    failure = _limit_failure(ctx, sim) if ctx.options.fail_on_limits else None
    if failure and sim.verdict is not Verdict.BREAKS:
        return Verdict.BREAKS, "sim", f"limits at the handoff (--fail-on-limits): {failure}; {sim.reason}"
    if sim.verdict is Verdict.UNSURE and static_reached:
        return Verdict.BREAKS, "static", (
            f"containment fails and {j.source}'s execution reaches the refused region "
            f"(the simulation refused its stops on the same clause); {sim.reason}"
        )
    return sim.verdict, ("sim" if sim.decided else None), sim.reason


def _handoff(ctx: Any, j: Handoff, evidence: list[Evidence], notes: list[str], gaps: list) -> tuple[Verdict, str | None, str]:
    static, sim, model = _first(evidence, "static"), _first(evidence, "sim"), _first(evidence, "model")
    if sim is not None:
        verdict, by, reason = _with_sim(ctx, j, static, sim, notes, gaps)
    elif model is not None and model.decided:
        verdict, by, reason = model.verdict, "model", model.reason
    else:
        if static is not None and static.details.get("containment") == "counterexample":
            gaps += _gaps(ctx, j, static, None)
            notes.append(_gap_note(j, gaps, False))
        parts = [e.reason for e in (static, model) if e is not None]
        liveness = f"liveness of {j.source} needs simulation or option models valid for this task"
        verdict, by, reason = Verdict.UNSURE, None, "; ".join(parts + [liveness])
    if gaps and ctx.options.fail_on_gaps and verdict is not Verdict.BREAKS:
        return Verdict.BREAKS, "static", f"contract gap (--fail-on-gaps): {gaps[0]['violation']}; fix: {gaps[0]['fix']}"
    return verdict, by, reason


def combine_handoff(ctx: Any, j: Handoff, evidence: list[Evidence]) -> HandoffResult:
    """The verdict of handoff ``j`` from its evidence, following the precedence in the module doc."""
    notes: list[str] = []
    gaps: list[dict[str, Any]] = []
    checks: list[PremiseCheck] = []
    if not j.is_entry:
        checks, _ = _premise_notes(ctx, j, _first(evidence, "static"), notes)
    structural = _first(evidence, "structural")
    sim = _first(evidence, "sim")
    evidence = [_promote(e, reached_clauses(sim)) if e.method == "static" and not j.is_entry else e for e in evidence]
    if structural is not None and structural.decided:
        verdict, by, reason = Verdict.BREAKS, "static", f"structural mismatch: {structural.reason}"
    elif j.is_entry:
        verdict, by, reason = _entry(evidence)
    else:
        verdict, by, reason = _handoff(ctx, j, evidence, notes, gaps)
    b = ctx.target_skill(j)
    return HandoffResult(
        handoff=j, verdict=verdict, decided_by=by, reason=reason, evidence=tuple(evidence),
        starts_when=b.starts_when, parameters=dict(b.parameters), notes=tuple(notes), premise_checks=tuple(checks),
        gaps=tuple(gaps),
    )
