"""Cheap sound answers about two regions before z3: balls and boxes over named state.

A region ``S`` (a stop region) and a predicate ``T`` (an initiation set or the goal) are
read as conjunctions of atoms. The atoms this module understands, for a state name
``v`` (scalar or vector) and constants ``c``, ``r`` (numbers, vector literals, or bound
skill parameters):

- balls: ``norm(v - c) < r`` (``<=`` too; ``norm(v)`` is centred at 0);
- boxes: ``all(abs(v - c) <= r)``, ``all(abs(v) <= r)``, and one-sided bounds on a
  name or a component (``v >= a``, ``v[1] < b``, chained comparisons split in pairs);
- any other atom is kept as it is (``opaque``).

``S`` is over-approximated by the balls and boxes among its atoms (its other atoms and
the premises are dropped: a superset of the real stop states), ``T`` is the
conjunction of its atoms. Then, with a safety margin ``EPS`` against float rounding
(every test is strict by that margin, so open and closed boundaries are both covered;
only bounds written with exactly the same numbers are compared without it, minding
which of ``<`` and ``<=`` each side uses):

- ``proved`` when every atom of ``T`` contains one shape of ``S`` (ball in ball by
  centre distance plus radius, box in ball by its farthest corner, ball or box in a
  box by coordinates), or equals an atom of ``S`` written the same way (or the same
  left side under a wider bound);
- ``impossible`` when some atom of ``T`` and some shape of ``S`` on the same name are
  apart (centre distance beyond both radii, a ball's centre farther from a box than
  its radius, or boxes apart in one coordinate);
- otherwise ``None``: undecided, the caller asks z3.

Both answers hold for the superset, hence for the real stop states: sound. Pure
numpy, no solver.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from ..predicates.nodes import BinOp, BoolOp, Call, Compare, Index, Name, Node, Num, Vector

__all__ = ["EPS", "Ball", "Box", "Atoms", "atoms_of", "with_bounds", "fixed_values", "region_verdict"]

EPS = 1e-9  # margin on every comparison, relative to the magnitudes involved (float rounding)
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<="}


@dataclass(frozen=True, eq=False)
class Ball:
    """``norm(name - centre) < radius`` (or ``<=``), over the flattened name."""

    name: str
    centre: np.ndarray
    radius: float
    strict: bool = True  # ``<`` (the sphere itself excluded); ``<=`` includes it


@dataclass(frozen=True, eq=False)
class Box:
    """``low <= name <= high`` componentwise (infinite where unbounded), flattened; ``*_open`` marks ``<``."""

    name: str
    low: np.ndarray
    high: np.ndarray
    low_open: np.ndarray | None = None
    high_open: np.ndarray | None = None

    def opens(self) -> tuple[np.ndarray, np.ndarray]:
        closed = np.zeros(self.low.shape, dtype=bool)
        return (closed if self.low_open is None else self.low_open), (closed if self.high_open is None else self.high_open)


@dataclass(frozen=True)
class Atoms:
    """A predicate as a conjunction: its balls and boxes, and the atoms this module does not read."""

    balls: tuple[Ball, ...]
    boxes: tuple[Box, ...]
    opaque: tuple[Node, ...]
    bounded: tuple[tuple[Node, str, float], ...]  # (left side, "<" or "<=", bound): ``expr < bound`` of any other expr


def _margin(*values: float) -> float:
    return EPS * (1.0 + max((abs(v) for v in values if np.isfinite(v)), default=0.0))


def _constant(node: Node, constants: Mapping[str, Any]) -> np.ndarray | None:
    """The value of a constant node (number, vector of numbers, bound parameter), flattened; else None."""
    if isinstance(node, Num):
        return np.array([node.value])
    if isinstance(node, Vector) and all(isinstance(i, Num) for i in node.items):
        return np.array([i.value for i in node.items], dtype=np.float64)
    if isinstance(node, Name) and node.id in constants:
        return np.asarray(constants[node.id], dtype=np.float64).reshape(-1)
    return None


def _variable(node: Node, shapes: Mapping[str, tuple[int, ...]], constants: Mapping[str, Any]) -> int | None:
    """The flat size of a state name of at most one axis, else None."""
    if isinstance(node, Name) and node.id in shapes and node.id not in constants and len(shapes[node.id]) <= 1:
        return max(1, int(np.prod(shapes[node.id], dtype=int)))
    return None


def _offset(node: Node, shapes: Mapping[str, tuple[int, ...]], constants: Mapping[str, Any]) -> tuple[str, np.ndarray] | None:
    """``v``, ``v - c``, ``c - v``, ``v + c`` or ``c + v`` as (name, centre) with ``|node| = |v - centre|``; else None."""
    size = _variable(node, shapes, constants)
    if size is not None:
        return node.id, np.zeros(size)
    if not isinstance(node, BinOp) or node.op not in ("-", "+"):
        return None
    for var, const in ((node.left, node.right), (node.right, node.left)):
        size = _variable(var, shapes, constants)
        c = _constant(const, constants)
        if size is not None and c is not None and c.size in (1, size):
            centre = c if node.op == "-" else -c  # |v - c| = |c - v|; |v + c| = |v - (-c)|
            return var.id, np.broadcast_to(centre, (size,)).astype(np.float64)
    return None


def _component(node: Node, shapes: Mapping[str, tuple[int, ...]], constants: Mapping[str, Any]) -> tuple[str, int | None] | None:
    """A scalar name (component None), or ``v[i]`` of a vector name; else None."""
    if isinstance(node, Name) and node.id in shapes and node.id not in constants and shapes[node.id] in ((), (1,)):
        return node.id, None
    if isinstance(node, Index) and isinstance(node.target, Name) and node.target.id in shapes and node.target.id not in constants:
        shape = shapes[node.target.id]
        if len(shape) == 1 and -shape[0] <= node.index < shape[0]:
            return node.target.id, node.index % shape[0]
    return None


def _unbounded(name: str, shapes: Mapping[str, tuple[int, ...]]) -> Box:
    size = max(1, int(np.prod(shapes[name], dtype=int)))
    return Box(name, np.full(size, -np.inf), np.full(size, np.inf), np.zeros(size, dtype=bool), np.zeros(size, dtype=bool))


def _read_compare(left: Node, op: str, right: Node, shapes, constants) -> Ball | Box | tuple[Node, str, float] | None:
    """One comparison as a ball, a box, or a generic ``expr < bound``; None if none of these."""
    if op not in _FLIP:
        return None
    if _constant(left, constants) is not None and _constant(right, constants) is None:
        left, op, right = right, _FLIP[op], left
    bound = _constant(right, constants)
    if bound is None or bound.size != 1:
        return None
    b = float(bound[0])
    if isinstance(left, Call) and left.func == "norm" and op in ("<", "<="):
        found = _offset(left.args[0], shapes, constants)
        if found is not None:
            return Ball(found[0], found[1], b, op == "<")
    comp = _component(left, shapes, constants)
    if comp is not None:
        box = _unbounded(comp[0], shapes)
        i = 0 if comp[1] is None else comp[1]
        upper = op in ("<", "<=")
        (box.high if upper else box.low)[i] = b
        (box.high_open if upper else box.low_open)[i] = op in ("<", ">")
        return box
    return (left, op, b) if op in ("<", "<=") else None


def _read_all_abs(node: Call, shapes, constants) -> Box | None:
    """``all(abs(v - c) <= r)`` as a box."""
    inner = node.args[0]
    if not (isinstance(inner, Compare) and len(inner.ops) == 1 and inner.ops[0] in ("<", "<=")):
        return None
    left, right = inner.operands
    r = _constant(right, constants)
    if not (isinstance(left, Call) and left.func == "abs") or r is None:
        return None
    found = _offset(left.args[0], shapes, constants)
    if found is None or r.size not in (1, found[1].size):
        return None
    name, centre = found
    strict = np.full(centre.size, inner.ops[0] == "<")
    return Box(name, centre - r, centre + r, strict, strict.copy())


def atoms_of(pred: Any, constants: Mapping[str, Any] | None = None) -> Atoms:
    """``pred`` (a Predicate) as a conjunction of balls, boxes and other atoms."""
    constants = dict(constants or {})
    shapes = dict(pred.shapes)
    items = pred.root.items if isinstance(pred.root, BoolOp) and pred.root.op == "and" else (pred.root,)
    balls, boxes, opaque, bounded = [], [], [], []
    for item in items:
        read: list[Any] = []
        if isinstance(item, Compare):
            read = [_read_compare(a, op, b, shapes, constants) for a, op, b in item.links()]
        elif isinstance(item, Call) and item.func == "all":
            read = [_read_all_abs(item, shapes, constants)]
        if not read or any(r is None for r in read):
            opaque.append(item)
            continue
        for r in read:
            (balls if isinstance(r, Ball) else boxes if isinstance(r, Box) else bounded).append(r)
    return Atoms(tuple(balls), tuple(boxes), tuple(opaque), tuple(bounded))


def fixed_values(bounds: Mapping[str, tuple[Any, Any]]) -> dict[str, np.ndarray]:
    """Names whose premise bounds pin every component (low == high): constants for ``atoms_of``."""
    out = {}
    for name, (low, high) in bounds.items():
        low, high = np.asarray(low, dtype=np.float64), np.asarray(high, dtype=np.float64)
        if low.size and np.array_equal(low, high):
            out[name] = low
    return out


def with_bounds(atoms: Atoms, bounds: Mapping[str, tuple[Any, Any]]) -> Atoms:
    """``atoms`` and the premise boxes (closed): a stop region within the premises, as the solver sees it."""
    extra = tuple(Box(name, np.asarray(lo, dtype=np.float64).reshape(-1).copy(), np.asarray(hi, dtype=np.float64).reshape(-1).copy())
                  for name, (lo, hi) in bounds.items())
    return Atoms(atoms.balls, atoms.boxes + extra, atoms.opaque, atoms.bounded)


# ---------------------------------------------------------------------------
# the shapes of S against one atom of T


def _stop_box(s: Atoms, name: str) -> Box | None:
    """The tightest box around S on ``name``: its boxes and the bounding boxes of its balls."""
    found = [b for b in s.boxes if b.name == name] + [Box(name, b.centre - b.radius, b.centre + b.radius) for b in s.balls if b.name == name]
    if not found:
        return None
    low = np.max([b.low for b in found], axis=0)
    high = np.min([b.high for b in found], axis=0)
    # a merged bound is open when some box reaching it is open (balls' bounding boxes count as closed: a superset)
    low_open = np.any([(b.low == low) & b.opens()[0] for b in found], axis=0)
    high_open = np.any([(b.high == high) & b.opens()[1] for b in found], axis=0)
    return Box(name, low, high, low_open, high_open)


def _box_distance(point: np.ndarray, box: Box) -> float:
    gap = np.maximum(np.maximum(box.low - point, point - box.high), 0.0)
    return float(np.linalg.norm(gap))


def _ball_contains(s: Atoms, t: Ball) -> bool:
    for b in (b for b in s.balls if b.name == t.name):
        if np.array_equal(b.centre, t.centre) and (b.radius < t.radius or (b.radius == t.radius and (b.strict or not t.strict))):
            return True  # the same centre, written with the same numbers: no rounding involved
        reach = float(np.linalg.norm(b.centre - t.centre)) + b.radius
        if reach + _margin(reach, t.radius) <= t.radius:
            return True
    box = _stop_box(s, t.name)
    if box is not None and np.all(np.isfinite(box.low)) and np.all(np.isfinite(box.high)):
        corner = float(np.linalg.norm(np.maximum(np.abs(box.low - t.centre), np.abs(box.high - t.centre))))
        return corner + _margin(corner, t.radius) <= t.radius
    return False


def _box_contains(s: Atoms, t: Box) -> bool:
    box = _stop_box(s, t.name)
    if box is None:
        return False
    (s_lo_open, s_hi_open), (t_lo_open, t_hi_open) = box.opens(), t.opens()
    same_lo = (box.low == t.low) & (s_lo_open | ~t_lo_open)  # equal numbers: S's side open, or T's closed
    same_hi = (box.high == t.high) & (s_hi_open | ~t_hi_open)
    lo_ok = np.all((t.low == -np.inf) | same_lo | (box.low - _margin_arr(box.low, t.low) >= t.low))
    hi_ok = np.all((t.high == np.inf) | same_hi | (box.high + _margin_arr(box.high, t.high) <= t.high))
    return bool(lo_ok and hi_ok)


def _margin_arr(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    m = np.maximum(np.where(np.isfinite(a), np.abs(a), 0.0), np.where(np.isfinite(b), np.abs(b), 0.0))
    return EPS * (1.0 + m)


def _ball_apart(s: Atoms, t: Ball) -> bool:
    for b in (b for b in s.balls if b.name == t.name):
        d = float(np.linalg.norm(b.centre - t.centre))
        if d - _margin(d, b.radius, t.radius) >= b.radius + t.radius:
            return True
    box = _stop_box(s, t.name)
    if box is None:
        return False
    d = _box_distance(t.centre, box)
    return d - _margin(d, t.radius) >= t.radius


def _box_apart(s: Atoms, t: Box) -> bool:
    box = _stop_box(s, t.name)
    if box is None:
        return False
    if np.any(box.high + _margin_arr(box.high, t.low) <= t.low) or np.any(box.low - _margin_arr(box.low, t.high) >= t.high):
        return True
    for b in (b for b in s.balls if b.name == t.name):
        d = _box_distance(b.centre, t)
        if d - _margin(d, b.radius) >= b.radius:
            return True
    return False


def _bounded_contains(s: Atoms, t: tuple[Node, str, float]) -> bool:
    """``expr < b`` in T follows from ``expr < a`` in S (same left side) with ``a`` below ``b``."""
    left, op, b = t
    for s_left, s_op, a in s.bounded:
        if s_left == left and (a + _margin(a, b) <= b or (a == b and (op == "<=" or s_op == "<"))):
            return True
    return False


def region_verdict(stop: Atoms, target: Atoms) -> str | None:
    """``"proved"`` (S inside T), ``"impossible"`` (S and T never meet) or None (undecided)."""
    if (all(o in stop.opaque for o in target.opaque) and all(_ball_contains(stop, t) for t in target.balls)
            and all(_box_contains(stop, t) for t in target.boxes) and all(_bounded_contains(stop, t) for t in target.bounded)):
        return "proved"  # (asked first, as z3 is: an empty S is inside everything)
    if any(_ball_apart(stop, t) for t in target.balls) or any(_box_apart(stop, t) for t in target.boxes):
        return "impossible"
    return None
