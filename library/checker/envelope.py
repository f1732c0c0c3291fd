"""The physical envelope of a robot for static checks: layout bounds, declared limits, raw aliases.

What the static method may assume about any state A can end in:

- every quantity lies within its layout ``low``/``high`` (joint limits, velocity
  envelopes, workspace boxes the env declares);
- A's declared limits hold (they are promises `kinetome run` reports on in
  simulation): ``joint_speed`` bounds |qvel| of actuated joints, ``torque``
  bounds |torque|, ``end_effector_speed`` bounds norm(fingertip_vel);
- quantities read from the same qpos/qvel entry are equal (``torso_pitch ==
  qpos[2]``), which keeps solver models consistent.

Everything else about derived quantities (fingertip from qpos...) is relaxed:
they are free variables within their envelope, so a proof stays sound.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

__all__ = ["Envelope", "physical_envelope", "component_text", "raw_names", "relaxed_names"]


def component_text(name: str, shape: tuple[int, ...], k: int) -> str:
    """Predicate text of flat component ``k`` of ``name`` (``qpos[2]``, ``m[1][0]``, ``h``)."""
    if not shape:
        return name
    return name + "".join(f"[{i}]" for i in np.unravel_index(k, shape))


def raw_names(rig: Any) -> frozenset[str]:
    """Quantities read straight from qpos or qvel: independent coordinates of the state."""
    return frozenset(n for n, src in rig.sources.items() if src.field in ("qpos", "qvel") and not rig.layout[n].derived)


def relaxed_names(rig: Any, names: set[str] | frozenset[str]) -> list[str]:
    """Of ``names`` (layout quantities), those the solver treats as free variables."""
    raw = raw_names(rig)
    return sorted(n for n in names if n in rig.layout and n not in raw)


@dataclass(frozen=True, eq=False)
class Envelope:
    """Bounds (name -> flat (low, high), inf for open ends), extra premise predicates, and what was assumed."""

    bounds: Mapping[str, tuple[np.ndarray, np.ndarray]]
    premises: tuple[Any, ...]  # Predicate
    assumptions: tuple[str, ...]

    def contains(self, values: Mapping[str, np.ndarray], *, tol: float = 1e-9) -> np.ndarray:
        """(B,) bool: rows of ``values`` inside every bound and premise (``tol`` absorbs float rounding)."""
        rows = None
        ok = None
        for name, (low, high) in self.bounds.items():
            if name not in values:
                continue
            arr = np.asarray(values[name], dtype=np.float64)
            flat = arr.reshape(arr.shape[0], -1)
            inside = np.all((flat >= low - tol) & (flat <= high + tol), axis=1)
            ok = inside if ok is None else ok & inside
            rows = flat.shape[0]
        for p in self.premises:
            if p.names <= set(values):
                held = p.evaluate(values)
                ok = held if ok is None else ok & held
        if ok is None:
            rows = rows or 1
            return np.ones(rows, dtype=bool)
        return ok


def _bounds_of(q: Any) -> tuple[np.ndarray, np.ndarray]:
    size = q.size
    low = np.full(size, -np.inf) if q.low is None else np.asarray(q.low, dtype=np.float64).reshape(-1)
    high = np.full(size, np.inf) if q.high is None else np.asarray(q.high, dtype=np.float64).reshape(-1)
    return low.copy(), high.copy()


def physical_envelope(rig: Any, limits: Any = None) -> Envelope:
    """The envelope of ``rig`` with the declared ``limits`` (a spec's Limits, or None) of the skill ending."""
    from ..predicates import parse_predicate

    layout = rig.layout
    shapes = layout.shapes()
    bounds: dict[str, tuple[np.ndarray, np.ndarray]] = {q.name: _bounds_of(q) for q in layout}
    assumptions = ["layout bounds (joint limits, velocity envelopes) hold"]
    premises = []
    if limits is not None:
        js = getattr(limits, "joint_speed", None)
        if js is not None and "qvel" in bounds and rig.actuated_qvel:
            low, high = bounds["qvel"]
            src = rig.sources.get("qvel")
            for dof in rig.actuated_qvel:
                if src is not None and src.field == "qvel" and dof in src.index:
                    k = src.index.index(dof)
                    low[k], high[k] = max(low[k], -js), min(high[k], js)
            assumptions.append(f"declared joint_speed <= {js:g} rad/s holds on actuated joints")
        tq = getattr(limits, "torque", None)
        if tq is not None and "torque" in bounds:
            low, high = bounds["torque"]
            bounds["torque"] = (np.maximum(low, -tq), np.minimum(high, tq))
            assumptions.append(f"declared torque <= {tq:g} N m holds")
        ee = getattr(limits, "end_effector_speed", None)
        if ee is not None and "fingertip_vel" in shapes:
            premises.append(parse_predicate(f"norm(fingertip_vel) <= {float(ee)!r}", shapes, what="end_effector_speed limit"))
            assumptions.append(f"declared end_effector_speed <= {ee:g} m/s holds")
    # Quantities that read the same qpos/qvel entry are the same number.
    first: dict[tuple[str, int], str] = {}
    aliases = []
    for q in layout:
        src = rig.sources.get(q.name)
        if src is None or src.field not in ("qpos", "qvel") or q.derived:
            continue
        for k, idx in enumerate(src.index):
            here = component_text(q.name, q.shape, k)
            key = (src.field, int(idx))
            if key in first:
                aliases.append(f"{here} == {first[key]}")
            else:
                first[key] = here
    for text in aliases:
        premises.append(parse_predicate(text, shapes, what="state alias"))
    return Envelope(bounds, tuple(premises), tuple(assumptions))
