"""SMT back-end: predicates as z3 formulas over real variables, and implication checks.

This is the only module of the package that imports z3. Each scalar component
of a named quantity becomes one z3 ``Real`` (``fingertip[0]``, ...); skill
parameters with fixed values are substituted as exact constants. The numpy
back-end's NaN rules are kept exactly: every real sub-expression carries a
"defined" condition (false where numpy would give NaN: division by zero,
square root of a negative), and a comparison holds only where both sides are
defined. ``norm`` and ``sqrt`` get auxiliary variables pinned by side
constraints (``n >= 0, n*n == sum of squares``) collected in the context; they
are definitional (satisfiable for every value of the inputs), so adding them
never changes the meaning of a formula.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Literal, Mapping, Sequence

import numpy as np
import z3

from kinetome.library.predicates.nodes import (
    BinOp,
    BoolOp,
    Call,
    Compare,
    Index,
    Name,
    Neg,
    Node,
    Not,
    Num,
    Power,
    Vector,
    Visitor,
)
from kinetome.library.predicates.predicate import Predicate
from kinetome.library.predicates.typecheck import check_shapes

__all__ = ["SmtContext", "to_z3", "check_implication", "ImplicationResult"]

Status = Literal["proved", "counterexample", "unknown"]


def _size(shape: tuple[int, ...]) -> int:
    return int(np.prod(shape, dtype=np.int64)) if shape else 1


def _component_names(name: str, shape: tuple[int, ...]) -> list[str]:
    if shape == ():
        return [name]
    return [name + "".join(f"[{i}]" for i in index) for index in np.ndindex(*shape)]


def _exact(x: float) -> z3.RatNumRef:
    """The exact rational value of a float64."""
    frac = Fraction(float(x))
    return z3.RealVal(f"{frac.numerator}/{frac.denominator}")


def _all(conditions: Sequence[z3.BoolRef | None]) -> z3.BoolRef | None:
    present = [c for c in conditions if c is not None]
    if not present:
        return None
    return present[0] if len(present) == 1 else z3.And(*present)


@dataclass
class _Real:
    """Numbers of one shape, row-major, each with the condition under which numpy gives no NaN."""

    shape: tuple[int, ...]
    items: list[z3.ArithRef]
    defined: list[z3.BoolRef | None]

    def at(self, k: int) -> tuple[z3.ArithRef, z3.BoolRef | None]:
        if self.shape == ():
            return self.items[0], self.defined[0]
        return self.items[k], self.defined[k]


@dataclass
class _Bool:
    shape: tuple[int, ...]
    items: list[z3.BoolRef]


def _common_shape(parts: Sequence[_Real | _Bool]) -> tuple[int, ...]:
    shape: tuple[int, ...] = ()
    for p in parts:
        if p.shape != ():
            shape = p.shape
    return shape


class SmtContext:
    """Real variables per scalar component of each named quantity, constants, side constraints.

    ``names`` (optional) declares quantities up front (name -> shape);
    others are created when a predicate first uses them. ``constants`` fixes
    the values of names such as a skill's parameters (``{"target": array}``);
    they are substituted as exact rationals of their float64 values.
    """

    def __init__(
        self,
        names: Mapping[str, tuple[int, ...]] | None = None,
        *,
        constants: Mapping[str, np.ndarray | float] | None = None,
    ):
        self.shapes: dict[str, tuple[int, ...]] = check_shapes(names or {})
        self.constants: dict[str, np.ndarray] = {}
        for name, value in (constants or {}).items():
            arr = np.asarray(value, dtype=np.float64)
            if not np.all(np.isfinite(arr)):
                raise ValueError(f"constant {name!r} must be finite, got {arr.tolist()}")
            if name in self.shapes and self.shapes[name] != arr.shape:
                raise ValueError(
                    f"constant {name!r} must have shape {self.shapes[name]}, got {arr.shape}"
                )
            self.constants[name] = arr
        self.variables: dict[str, list[z3.ArithRef]] = {}
        self.side_constraints: list[z3.BoolRef] = []
        self._cache: dict[Node, _Real | _Bool] = {}
        self._aux = 0

    def declare(self, name: str, shape: tuple[int, ...]) -> None:
        """Record the shape of ``name``; a different shape than before is an error."""
        shape = tuple(shape)
        known = self.shapes.get(name)
        if name in self.constants and self.constants[name].shape != shape:
            raise ValueError(
                f"constant {name!r} has shape {self.constants[name].shape}, "
                f"but a predicate uses it with shape {shape}"
            )
        if known is not None and known != shape:
            raise ValueError(
                f"{name!r} has shape {known} in this context, but a predicate uses it with shape {shape}"
            )
        self.shapes[name] = shape

    def components(self, name: str) -> list[z3.ArithRef]:
        """z3 terms for each scalar component of ``name`` (constants as exact values)."""
        if name not in self.shapes:
            raise KeyError(f"{name!r} is not declared in this context; known: {sorted(self.shapes)}")
        if name in self.constants:
            return [_exact(x) for x in self.constants[name].reshape(-1)]
        if name not in self.variables:
            self.variables[name] = [z3.Real(n) for n in _component_names(name, self.shapes[name])]
        return self.variables[name]

    def auxiliary(self, label: str) -> z3.ArithRef:
        """A fresh real for an intermediate quantity (norm, sqrt)."""
        self._aux += 1
        return z3.Real(f"{label}!{self._aux}")

    def bound_constraints(self, bounds: Mapping[str, tuple[object, object]]) -> list[z3.BoolRef]:
        """``low <= x <= high`` per component of each declared name; infinite ends are left open.

        Constants, and names neither declared nor used by a translated
        predicate, are skipped: they have no variable, so a whole physical
        envelope can be passed as is (declare names to have them in models).
        """
        out: list[z3.BoolRef] = []
        for name, pair in bounds.items():
            if name not in self.shapes or name in self.constants:
                continue
            low, high = _bound_arrays(name, pair, self.shapes[name])
            for var, lo, hi in zip(self.components(name), low, high):
                if np.isfinite(lo):
                    out.append(var >= _exact(lo))
                if np.isfinite(hi):
                    out.append(var <= _exact(hi))
        return out

    def values_from(self, model: z3.ModelRef, bounds: Mapping[str, tuple[object, object]]) -> dict[str, np.ndarray]:
        """Every declared or used name and every constant as float64 arrays.

        Variables come from ``model``, constants are as given. A variable the model leaves free takes the middle of its bounds (or a
        finite end, or 0), so the result is always a complete, in-bounds state.
        """
        out: dict[str, np.ndarray] = {name: value.copy() for name, value in self.constants.items()}
        for name, shape in self.shapes.items():
            if name in self.constants:
                continue
            if name in bounds:
                low, high = _bound_arrays(name, bounds[name], shape)
            else:
                low = high = np.full(_size(shape), np.nan)
            values = np.empty(_size(shape))
            declared = self.variables.get(name)
            for k in range(_size(shape)):
                term = declared[k] if declared is not None else None
                value = model.eval(term, model_completion=False) if term is not None else None
                if value is not None and (z3.is_rational_value(value) or z3.is_algebraic_value(value)):
                    values[k] = _to_float(value)
                else:
                    values[k] = _fill(low[k], high[k])
            # rounding an algebraic witness to float64 must not step outside the box
            values = np.where(np.isnan(low), values, np.maximum(values, low))
            values = np.where(np.isnan(high), values, np.minimum(values, high))
            out[name] = values.reshape(shape)
        return out


def _fill(low: float, high: float) -> float:
    if np.isfinite(low) and np.isfinite(high):
        return 0.5 * (low + high)
    if np.isfinite(low):
        return float(low)
    if np.isfinite(high):
        return float(high)
    return 0.0


def _to_float(value: z3.ExprRef) -> float:
    """float64 of a z3 numeral; read as a double, not through its decimal string
    (which aborted the process in a long test session)."""
    if z3.is_algebraic_value(value):
        value = value.approx(20)
    return float(z3.Z3_get_numeral_double(value.ctx_ref(), value.as_ast()))


def _bound_arrays(name: str, pair: tuple[object, object], shape: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    try:
        low_raw, high_raw = pair
    except (TypeError, ValueError):
        raise ValueError(f"bounds of {name!r} must be a (low, high) pair, got {pair!r}") from None
    size = _size(shape)
    arrays = []
    for label, raw in (("low", low_raw), ("high", high_raw)):
        fill = -np.inf if label == "low" else np.inf
        arr = np.full(size, fill) if raw is None else np.asarray(raw, dtype=np.float64).reshape(-1)
        if arr.size == 1:
            arr = np.full(size, arr[0])
        if arr.size != size or np.any(np.isnan(arr)):
            raise ValueError(
                f"bounds {label} of {name!r} must be a number or {size} numbers (no NaN), got {raw!r}"
            )
        arrays.append(arr)
    low, high = arrays
    if np.any(low > high):
        raise ValueError(f"bounds of {name!r} must have low <= high, got low={low.tolist()} high={high.tolist()}")
    return low, high


class _Translator(Visitor["_Real | _Bool"]):
    def __init__(self, ctx: SmtContext):
        self.ctx = ctx

    def visit(self, node: Node) -> _Real | _Bool:
        cached = self.ctx._cache.get(node)
        if cached is None:
            cached = super().visit(node)
            self.ctx._cache[node] = cached
        return cached

    def real(self, node: Node) -> _Real:
        out = self.visit(node)
        assert isinstance(out, _Real), f"expected numbers from {type(node).__name__}"
        return out

    def boolean(self, node: Node) -> _Bool:
        out = self.visit(node)
        assert isinstance(out, _Bool), f"expected booleans from {type(node).__name__}"
        return out

    def visit_num(self, node: Num) -> _Real:
        return _Real((), [_exact(node.value)], [None])

    def visit_name(self, node: Name) -> _Real:
        terms = self.ctx.components(node.id)
        return _Real(self.ctx.shapes[node.id], list(terms), [None] * len(terms))

    def visit_vector(self, node: Vector) -> _Real:
        parts = [self.real(x) for x in node.items]
        return _Real((len(parts),), [p.items[0] for p in parts], [p.defined[0] for p in parts])

    def visit_neg(self, node: Neg) -> _Real:
        x = self.real(node.operand)
        return _Real(x.shape, [-t for t in x.items], list(x.defined))

    def _elementwise(self, parts: list[_Real], combine) -> _Real:
        shape = _common_shape(parts)
        items, defined = [], []
        for k in range(_size(shape)):
            terms, conds = zip(*(p.at(k) for p in parts))
            term, cond = combine(list(terms))
            items.append(term)
            defined.append(_all([*conds, cond]))
        return _Real(shape, items, defined)

    def visit_binop(self, node: BinOp) -> _Real:
        op = node.op

        def combine(t: list[z3.ArithRef]) -> tuple[z3.ArithRef, z3.BoolRef | None]:
            a, b = t
            if op == "+":
                return a + b, None
            if op == "-":
                return a - b, None
            if op == "*":
                return a * b, None
            if z3.is_rational_value(b):
                return (a / b, None) if b.as_fraction() != 0 else (a, z3.BoolVal(False))
            return a / b, b != 0

        return self._elementwise([self.real(node.left), self.real(node.right)], combine)

    def visit_power(self, node: Power) -> _Real:
        base = self.real(node.base)
        if node.exponent == 0:  # numpy's ones_like: 1 even where the base is NaN
            return _Real(base.shape, [z3.RealVal(1)] * len(base.items), [None] * len(base.items))
        items = []
        for t in base.items:
            product = t
            for _ in range(node.exponent - 1):
                product = product * t
            items.append(product)
        return _Real(base.shape, items, list(base.defined))

    def visit_compare(self, node: Compare) -> _Bool:
        operands = [self.real(x) for x in node.operands]
        shape = _common_shape(operands)
        items = []
        for k in range(_size(shape)):
            links = []
            for i, op in enumerate(node.ops):
                (a, da), (b, db) = operands[i].at(k), operands[i + 1].at(k)
                links.append(_all([da, db, _relation(op, a, b)]))
            items.append(links[0] if len(links) == 1 else z3.And(*links))
        return _Bool(shape, items)

    def visit_boolop(self, node: BoolOp) -> _Bool:
        items = [self.boolean(x).items[0] for x in node.items]
        return _Bool((), [z3.And(*items) if node.op == "and" else z3.Or(*items)])

    def visit_not(self, node: Not) -> _Bool:
        return _Bool((), [z3.Not(self.boolean(node.operand).items[0])])

    def visit_call(self, node: Call) -> _Real | _Bool:
        f = node.func
        if f in ("all", "any"):
            items = self.boolean(node.args[0]).items
            if len(items) == 1:
                return _Bool((), [items[0]])
            return _Bool((), [z3.And(*items) if f == "all" else z3.Or(*items)])
        args = [self.real(x) for x in node.args]
        if f == "abs":
            return self._elementwise(args, lambda t: (z3.If(t[0] >= 0, t[0], -t[0]), None))
        if f == "sqrt":
            return self._elementwise(args, self._sqrt)
        if f == "norm":
            x = args[0]
            if x.shape == ():
                return self._elementwise(args, lambda t: (z3.If(t[0] >= 0, t[0], -t[0]), None))
            n = self.ctx.auxiliary("norm")
            total = z3.Sum([t * t for t in x.items]) if len(x.items) > 1 else x.items[0] * x.items[0]
            self.ctx.side_constraints += [n >= 0, n * n == total]
            return _Real((), [n], [_all(x.defined)])
        pick = _minimum if f == "min" else _maximum
        if len(args) == 1:
            x = args[0]
            best = x.items[0]
            for t in x.items[1:]:
                best = pick(best, t)
            return _Real((), [best], [_all(x.defined)])

        def combine(t: list[z3.ArithRef]) -> tuple[z3.ArithRef, None]:
            best = t[0]
            for other in t[1:]:
                best = pick(best, other)
            return best, None

        return self._elementwise(args, combine)

    def _sqrt(self, t: list[z3.ArithRef]) -> tuple[z3.ArithRef, z3.BoolRef]:
        x = t[0]
        s = self.ctx.auxiliary("sqrt")
        self.ctx.side_constraints += [s >= 0, z3.Implies(x >= 0, s * s == x)]
        return s, x >= 0

    def visit_index(self, node: Index) -> _Real | _Bool:
        x = self.visit(node.target)
        n = x.shape[0]
        i = node.index % n
        inner = x.shape[1:]
        m = _size(inner)
        if isinstance(x, _Real):
            return _Real(inner, x.items[i * m : (i + 1) * m], x.defined[i * m : (i + 1) * m])
        return _Bool(inner, x.items[i * m : (i + 1) * m])


def _minimum(a: z3.ArithRef, b: z3.ArithRef) -> z3.ArithRef:
    return z3.If(a <= b, a, b)


def _maximum(a: z3.ArithRef, b: z3.ArithRef) -> z3.ArithRef:
    return z3.If(a >= b, a, b)


def _relation(op: str, a: z3.ArithRef, b: z3.ArithRef) -> z3.BoolRef:
    if op == "<":
        return a < b
    if op == "<=":
        return a <= b
    if op == ">":
        return a > b
    if op == ">=":
        return a >= b
    if op == "==":
        return a == b
    return a != b


def to_z3(pred: Predicate, ctx: SmtContext) -> z3.BoolRef:
    """The z3 formula of ``pred``; assert ``ctx.side_constraints`` alongside it."""
    for name, shape in pred.shapes:
        ctx.declare(name, shape)
    return _Translator(ctx).boolean(pred.root).items[0]


@dataclass(frozen=True)
class ImplicationResult:
    """Outcome of ``check_implication``.

    ``status``: ``"proved"`` (no state within the bounds satisfies the premises
    and violates the conclusion), ``"counterexample"`` (``model`` is such a
    state: every declared name, constants included, as float64 arrays) or
    ``"unknown"`` (timeout or solver incompleteness; ``reason`` says which).
    ``holds_in_float64`` tells, for a counterexample, whether the model rounded
    to float64 still satisfies the premises and violates the conclusion under
    the numpy back-end (it can fail when the witness sits exactly on a curved
    boundary).
    """

    status: Status
    model: dict[str, np.ndarray] | None = None
    reason: str = ""
    holds_in_float64: bool | None = None

    def __post_init__(self) -> None:
        if self.status not in ("proved", "counterexample", "unknown"):
            raise ValueError(f"status must be proved, counterexample or unknown, got {self.status!r}")
        if (self.status == "counterexample") != (self.model is not None):
            raise ValueError("a model is given exactly when the status is 'counterexample'")


def check_implication(
    premises: Sequence[Predicate],
    conclusion: Predicate,
    ctx: SmtContext,
    *,
    bounds: Mapping[str, tuple[object, object]] | None = None,
    timeout_ms: int = 10_000,
) -> ImplicationResult:
    """Do ``premises`` (and ``bounds``) imply ``conclusion``? Asks z3 whether the
    premises, the bounds and ``not conclusion`` can hold at once.

    ``bounds`` maps names to ``(low, high)``: numbers or one per component,
    ``None`` or infinities for an open end; bounds on constants and on names
    the context neither declares nor has seen in a predicate are ignored.
    """
    if isinstance(timeout_ms, bool) or not isinstance(timeout_ms, int) or timeout_ms < 1:
        raise ValueError(f"timeout_ms must be a positive integer, got {timeout_ms!r}")
    bounds = dict(bounds or {})
    premise_terms = [to_z3(p, ctx) for p in premises]
    conclusion_term = to_z3(conclusion, ctx)
    solver = z3.Solver()
    solver.set("timeout", timeout_ms)
    solver.add(*ctx.bound_constraints(bounds))
    solver.add(*premise_terms)
    solver.add(z3.Not(conclusion_term))
    solver.add(*ctx.side_constraints)
    verdict = solver.check()
    if verdict == z3.unsat:
        return ImplicationResult("proved")
    if verdict == z3.sat:
        model = ctx.values_from(solver.model(), bounds)
        batch = {name: value[None, ...] for name, value in model.items()}
        replay = all(bool(p.evaluate(batch)[0]) for p in premises) and not bool(
            conclusion.evaluate(batch)[0]
        )
        return ImplicationResult("counterexample", model, holds_in_float64=replay)
    return ImplicationResult("unknown", reason=solver.reason_unknown())
