"""What one method found about one handoff: a verdict or none, why, counts, counterexample states."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .verdict import Estimate, Verdict

__all__ = ["Handoff", "Counterexample", "Evidence", "counterexample_from"]


@dataclass(frozen=True)
class Handoff:
    """Where the checker looks: ``index`` 0 is the entry (initial states -> first skill);
    ``index`` j >= 1 is the handoff from skill j-1 to skill j.
    """

    index: int
    source: str  # skill ref of A, or "initial states"
    target: str  # skill ref of B

    @property
    def is_entry(self) -> bool:
        return self.index == 0

    @property
    def label(self) -> str:
        return f"{self.source} -> {self.target}"


def _plain(value: Any) -> Any:
    arr = np.asarray(value, dtype=np.float64)
    return arr.tolist() if arr.shape else float(arr)


@dataclass(frozen=True)
class Counterexample:
    """A state that should have been accepted by B's ``starts_when`` and was not.

    ``state``: quantity -> value (lists for JSON); ``violations``: the failing
    clauses as text (``qvel[2] = 1.8, needs <= 1 (over by 0.8)``) with the
    structured form in ``clauses``. ``source`` is ``sim`` (an episode's end
    state), ``z3`` (a solver model), ``model`` (an end-state model sample) or
    ``start`` (a sampled initial state). ``confirmed`` tells whether the state is
    known to be physical: a simulated state, or a solver model realised in
    MuJoCo (see ``static.py``). ``note`` says where it came from.
    """

    state: Mapping[str, Any]
    violations: tuple[str, ...]
    clauses: tuple[Mapping[str, Any], ...]
    source: str
    confirmed: bool
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "source": self.source,
            "confirmed": self.confirmed,
            "note": self.note,
            "violations": list(self.violations),
            "clauses": [dict(c) for c in self.clauses],
            "state": {k: v for k, v in self.state.items()},
        }


def counterexample_from(
    predicate: Any,
    values: Mapping[str, np.ndarray],
    row: int,
    *,
    parameters: Mapping[str, np.ndarray],
    names: tuple[str, ...],
    source: str,
    confirmed: bool,
    note: str = "",
) -> Counterexample:
    """Explain why ``predicate`` (B's starts_when) fails on batch row ``row`` of ``values``."""
    from ..predicates import explain

    merged = {**{k: np.asarray(v) for k, v in values.items()}, **parameters}
    found = explain(predicate, merged, row)
    state = {n: _plain(np.asarray(values[n])[row]) for n in names if n in values}
    clauses = tuple(
        {
            "clause": v.clause_text,
            "quantity": v.quantity_text,
            "value": None if np.isnan(v.value) else float(v.value),
            "relation": v.relation,
            "bound": None if np.isnan(v.bound) else float(v.bound),
            "margin": None if np.isnan(v.margin) else float(v.margin),
        }
        for v in found
    )
    return Counterexample(state, tuple(str(v) for v in found), clauses, source, confirmed, note)


@dataclass(frozen=True, eq=False)
class Evidence:
    """One method's finding on one handoff.

    ``verdict`` is UNSURE when the method did not decide. ``estimate`` holds
    counts and the exact interval (sampling methods). ``candidates`` are solver
    models not known to be physical. ``details`` is JSON-ready extra data
    (timeouts, relaxed quantities...). ``points`` are end states of A (name ->
    (n, *shape)) with ``accepted`` (n,) flags, for plots; not serialised.
    """

    method: str
    verdict: Verdict
    reason: str
    estimate: Estimate | None = None
    counterexamples: tuple[Counterexample, ...] = ()
    candidates: tuple[Counterexample, ...] = ()
    details: Mapping[str, Any] = field(default_factory=dict)
    points: Mapping[str, np.ndarray] | None = None
    accepted: np.ndarray | None = None
    premises: tuple[Any, ...] = ()  # envelope.Premise objects a static proof used (not serialised)

    @property
    def decided(self) -> bool:
        return self.verdict is not Verdict.UNSURE

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": self.method,
            "verdict": self.verdict.value,
            "reason": self.reason,
            "estimate": None if self.estimate is None else self.estimate.to_dict(),
            "counterexamples": [c.to_dict() for c in self.counterexamples],
            "candidates": [c.to_dict() for c in self.candidates],
            "details": dict(self.details),
        }
