"""The physical envelope of a robot for static checks, as a list of named premises.

What the static method may assume about any state A can end in, each as a
``Premise`` with a label and a kind:

- ``enforced`` (the simulator makes it true): ranges of limited hinge and slide
  joints, actuator ranges (quantities read from ``ctrl``, which is clipped), and
  quantities that read the same qpos/qvel entry being equal (``torso_pitch ==
  qpos[2]``);
- ``declared`` (a skill's promise, not enforced): A's declared limits, i.e.
  ``joint_speed`` bounds |qvel| of actuated joints, ``torque`` bounds |torque|,
  ``end_effector_speed`` bounds norm(fingertip_vel);
- ``assumed`` (the env's layout says so, nothing enforces it): every other
  layout ``low``/``high``, such as velocity envelopes and workspace boxes.

A proof lists the premises it used (z3's unsat core, see ``premises.py``); one
that used a declared or assumed premise counts only after this chain's simulated
episodes confirm it. Derived quantities (fingertip from qpos...) are free
variables within their envelope, so a proof stays sound.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

__all__ = ["Envelope", "Premise", "physical_envelope", "component_text", "raw_names", "relaxed_names", "ENFORCED", "DECLARED", "ASSUMED"]

ENFORCED, DECLARED, ASSUMED = "enforced", "declared", "assumed"


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
class Premise:
    """One thing a proof may assume: box ``bounds`` (name -> flat (low, high), inf = open) or a ``predicate``."""

    label: str
    kind: str  # ENFORCED | DECLARED | ASSUMED
    bounds: Mapping[str, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)
    predicate: Any = None

    def holds(self, values: Mapping[str, np.ndarray], *, tol: float = 1e-9) -> np.ndarray:
        """(B,) bool: rows of ``values`` satisfying the premise (names missing from ``values`` are skipped)."""
        ok = None
        for name, (low, high) in self.bounds.items():
            if name in values:
                flat = np.asarray(values[name], dtype=np.float64).reshape(len(values[name]), -1)
                inside = np.all((flat >= low - tol) & (flat <= high + tol), axis=1)
                ok = inside if ok is None else ok & inside
        if self.predicate is not None and self.predicate.names <= set(values):
            held = self.predicate.evaluate(values)
            ok = held if ok is None else ok & held
        return np.ones(len(next(iter(values.values()))), dtype=bool) if ok is None else ok

    def worst(self, values: Mapping[str, np.ndarray]) -> tuple[float, str] | None:
        """The most extreme value seen against this premise, as (value, its text); None if nothing to measure."""
        if self.predicate is not None:
            return _worst_of_predicate(self.predicate, values)
        best: tuple[float, float, str] | None = None  # (margin past the bound, value, text)
        for name, (low, high) in self.bounds.items():
            if name not in values or len(values[name]) == 0:
                continue
            flat = np.asarray(values[name], dtype=np.float64).reshape(len(values[name]), -1)
            for k in range(flat.shape[1]):
                for bound, sign in ((high[k], 1.0), (low[k], -1.0)):
                    if np.isfinite(bound):
                        v = float(flat[:, k].max() if sign > 0 else flat[:, k].min())
                        margin = sign * (v - bound)
                        if best is None or margin > best[0]:
                            best = (margin, v, f"{component_text(name, _shape(values[name]), k)} = {v:.4g}")
        return None if best is None else (best[1], best[2])


def _shape(arr: np.ndarray) -> tuple[int, ...]:
    return tuple(np.asarray(arr).shape[1:])


def _worst_of_predicate(pred: Any, values: Mapping[str, np.ndarray]) -> tuple[float, str] | None:
    from ..predicates import explain

    if not pred.names <= set(values) or len(next(iter(values.values()))) == 0:
        return None
    held = pred.evaluate(values)
    rows = np.flatnonzero(~held)
    row = int(rows[0]) if rows.size else 0
    found = explain(pred, dict(values), row)
    if not found:
        return (float("nan"), f"{pred} holds in every state")
    v = found[0]
    return float(v.value), f"{v.quantity_text} = {v.value:.4g}"


@dataclass(frozen=True, eq=False)
class Envelope:
    """The premises, merged into bounds (name -> flat (low, high)) and extra predicates for search and tests."""

    items: tuple[Premise, ...]

    @property
    def bounds(self) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        out: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        for p in self.items:
            for name, (low, high) in p.bounds.items():
                if name in out:
                    out[name] = (np.maximum(out[name][0], low), np.minimum(out[name][1], high))
                else:
                    out[name] = (np.asarray(low, dtype=np.float64).copy(), np.asarray(high, dtype=np.float64).copy())
        return out

    @property
    def premises(self) -> tuple[Any, ...]:
        """The predicate premises (aliases, end-effector speed)."""
        return tuple(p.predicate for p in self.items if p.predicate is not None)

    @property
    def assumptions(self) -> tuple[str, ...]:
        return tuple(f"{p.label} [{p.kind}]" for p in self.items)

    def contains(self, values: Mapping[str, np.ndarray], *, tol: float = 1e-9) -> np.ndarray:
        """(B,) bool: rows of ``values`` inside every premise (``tol`` absorbs float rounding)."""
        ok = None
        for p in self.items:
            held = p.holds(values, tol=tol)
            ok = held if ok is None else ok & held
        if ok is None:
            return np.ones(len(next(iter(values.values()))) if values else 1, dtype=bool)
        return ok


def _bounds_of(q: Any) -> tuple[np.ndarray, np.ndarray]:
    size = q.size
    low = np.full(size, -np.inf) if q.low is None else np.asarray(q.low, dtype=np.float64).reshape(-1)
    high = np.full(size, np.inf) if q.high is None else np.asarray(q.high, dtype=np.float64).reshape(-1)
    return low.copy(), high.copy()


def _limited_qpos(rig: Any) -> set[int]:
    """qpos indices of hinge and slide joints MuJoCo keeps inside a range."""
    import mujoco

    m = rig.model
    out = set()
    for j in range(m.njnt):
        if m.jnt_limited[j] and int(m.jnt_type[j]) in (mujoco.mjtJoint.mjJNT_HINGE, mujoco.mjtJoint.mjJNT_SLIDE):
            out.add(int(m.jnt_qposadr[j]))
    return out


def _split_box(name: str, low: np.ndarray, high: np.ndarray, enforced: np.ndarray) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(kind, low, high) parts of one quantity's box: enforced components and the rest."""
    parts = []
    for kind, mask in ((ENFORCED, enforced), (ASSUMED, ~enforced)):
        lo, hi = np.where(mask, low, -np.inf), np.where(mask, high, np.inf)
        if np.any(np.isfinite(lo)) or np.any(np.isfinite(hi)):
            parts.append((kind, lo, hi))
    return parts


def _layout_premises(rig: Any) -> list[Premise]:
    limited = _limited_qpos(rig)
    out = []
    for q in rig.layout:
        low, high = _bounds_of(q)
        src = rig.sources.get(q.name)
        enforced = np.zeros(q.size, dtype=bool)
        if src is not None and src.field == "ctrl":
            enforced[:] = True
        elif src is not None and src.field == "qpos" and not q.derived:
            enforced = np.array([int(i) in limited for i in src.index], dtype=bool)
        for kind, lo, hi in _split_box(q.name, low, high, enforced):
            what = {"ctrl": "actuator range", "qpos": "joint range"}.get(getattr(src, "field", ""), "layout envelope")
            if kind == ASSUMED:
                what = "velocity envelope" if q.name.endswith("vel") or q.name == "qvel" else "layout envelope"
            out.append(Premise(f"{what} of {q.name}", kind, {q.name: (lo, hi)}))
    return out


def _declared_premises(rig: Any, limits: Any, owner: str) -> list[Premise]:
    from ..predicates import parse_predicate

    if limits is None:
        return []
    out = []
    shapes = rig.layout.shapes()
    js = getattr(limits, "joint_speed", None)
    src = rig.sources.get("qvel")
    if js is not None and "qvel" in shapes and src is not None and src.field == "qvel" and rig.actuated_qvel:
        size = rig.layout["qvel"].size
        low, high = np.full(size, -np.inf), np.full(size, np.inf)
        for dof in rig.actuated_qvel:
            if dof in src.index:
                k = src.index.index(dof)
                low[k], high[k] = -js, js
        out.append(Premise(f"{owner} declared joint_speed <= {js:g} rad/s on actuated joints", DECLARED, {"qvel": (low, high)}))
    tq = getattr(limits, "torque", None)
    if tq is not None and "torque" in shapes:
        size = rig.layout["torque"].size
        out.append(Premise(f"{owner} declared torque <= {tq:g} N m", DECLARED, {"torque": (np.full(size, -tq), np.full(size, tq))}))
    ee = getattr(limits, "end_effector_speed", None)
    if ee is not None and "fingertip_vel" in shapes:
        pred = parse_predicate(f"norm(fingertip_vel) <= {float(ee)!r}", shapes, what="end_effector_speed limit")
        out.append(Premise(f"{owner} declared end_effector_speed <= {ee:g} m/s", DECLARED, predicate=pred))
    return out


def _alias_premises(rig: Any) -> list[Premise]:
    """Quantities that read the same qpos/qvel entry are the same number."""
    from ..predicates import parse_predicate

    layout, shapes = rig.layout, rig.layout.shapes()
    first: dict[tuple[str, int], str] = {}
    out = []
    for q in layout:
        src = rig.sources.get(q.name)
        if src is None or src.field not in ("qpos", "qvel") or q.derived:
            continue
        for k, idx in enumerate(src.index):
            here = component_text(q.name, q.shape, k)
            key = (src.field, int(idx))
            if key in first:
                text = f"{here} == {first[key]}"
                out.append(Premise(f"{text} (same {src.field} entry)", ENFORCED, predicate=parse_predicate(text, shapes, what="state alias")))
            else:
                first[key] = here
    return out


def physical_envelope(rig: Any, limits: Any = None, *, owner: str = "") -> Envelope:
    """The envelope of ``rig`` with the declared ``limits`` (a spec's Limits, or None) of skill ``owner``."""
    owner = owner or "the skill"
    return Envelope(tuple(_layout_premises(rig) + _declared_premises(rig, limits, owner) + _alias_premises(rig)))
