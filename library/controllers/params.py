"""Parameters as data: declarations and the one generic checker of values and bounds."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import Problem
from .errors import ControllerError, close_match_hint, problem

__all__ = ["ParamDecl", "resolve_bounds", "check_value", "check_parameters", "format_number"]


def format_number(x: float) -> str:
    """Compact number text for messages (``1000``, ``0.1``, ``inf``, ``nan``)."""
    return f"{float(x):g}"


def _element(index: tuple[int, ...]) -> str:
    if not index:
        return ""
    return f" at element {index[0]}" if len(index) == 1 else f" at element {index}"


def _full(value: Any, shape: tuple[int, ...]) -> np.ndarray:
    arr = np.array(np.broadcast_to(np.asarray(value, dtype=np.float64), shape), dtype=np.float64)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class ParamDecl:
    """One named, bounded parameter of a controller kind.

    ``low``/``high`` are the default bounds (a number or one per element);
    ``limit_low``/``limit_high`` are the kind's hard limits (e.g. gains >= 0)
    that user bounds must stay inside. ``default`` None means the value is
    required. ``trainable`` False marks stored-but-not-optimised values such as
    an input normaliser. ``shape_help`` is the fix shown for a wrong shape.
    """

    name: str
    shape: tuple[int, ...]
    low: Any
    high: Any
    default: Any = None
    doc: str = ""
    unit: str = ""
    limit_low: float | None = None
    limit_high: float | None = None
    trainable: bool = True
    shape_help: str = ""

    def __post_init__(self) -> None:
        if not self.name.isidentifier():
            raise ValueError(f"parameter name must be an identifier, got {self.name!r}")
        shape = tuple(self.shape)
        if any((not isinstance(d, (int, np.integer))) or d < 1 for d in shape):
            raise ValueError(f"parameter {self.name}: shape must be positive ints, got {shape}")
        shape = tuple(int(d) for d in shape)
        object.__setattr__(self, "shape", shape)
        low, high = _full(self.low, shape), _full(self.high, shape)
        if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high)) and np.all(low < high)):
            raise ValueError(f"parameter {self.name}: default bounds must be finite with low < high, got {low} {high}")
        lo_lim = -math.inf if self.limit_low is None else float(self.limit_low)
        hi_lim = math.inf if self.limit_high is None else float(self.limit_high)
        if np.any(low < lo_lim) or np.any(high > hi_lim):
            raise ValueError(f"parameter {self.name}: default bounds must lie within the limits [{lo_lim}, {hi_lim}]")
        object.__setattr__(self, "low", low)
        object.__setattr__(self, "high", high)
        if self.default is not None:
            default = _full(self.default, shape)
            if not np.all(np.isfinite(default)) or np.any(default < low) or np.any(default > high):
                raise ValueError(f"parameter {self.name}: default must be finite and inside the default bounds, got {default}")
            object.__setattr__(self, "default", default)

    @property
    def size(self) -> int:
        return int(np.prod(self.shape, dtype=np.int64)) if self.shape else 1

    @property
    def limits(self) -> tuple[float, float]:
        """The hard limits as numbers (-inf/inf when the kind has none)."""
        lo = -math.inf if self.limit_low is None else float(self.limit_low)
        hi = math.inf if self.limit_high is None else float(self.limit_high)
        return lo, hi

    @property
    def required(self) -> bool:
        return self.default is None

    def shape_fix(self) -> str:
        return self.shape_help or f"give an array of shape {self.shape}"


def _as_array(value: Any, field: str, what: str, problems: list[Problem]) -> np.ndarray | None:
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        problems.append(problem(field, f"{what} must be numbers, got {value!r}", "give a number or a (nested) list of numbers"))
        return None
    return arr


def resolve_bounds(decl: ParamDecl, given: Any, *, field: str) -> tuple[tuple[np.ndarray, np.ndarray] | None, list[Problem]]:
    """Full-shape (low, high) from a user ``(low, high)`` pair (each a number or per element).

    ``given`` None gives the declared default bounds. Problems are returned,
    not raised, so every mistake is reported at once.
    """
    if given is None:
        return (decl.low, decl.high), []
    problems: list[Problem] = []
    if isinstance(given, Mapping) and set(given) == {"low", "high"}:
        given = (given["low"], given["high"])
    if isinstance(given, (str, bytes)) or not isinstance(given, Sequence) or len(given) != 2:
        problems.append(problem(field, f"must be a (low, high) pair, got {given!r}", "give low and high, each a number or one per element"))
        return None, problems
    arrays = []
    for side, raw in zip(("low", "high"), given):
        arr = _as_array(raw, field, side, problems)
        if arr is None:
            continue
        if arr.shape not in ((), decl.shape):
            problems.append(problem(
                field,
                f"{side} must be a number or have shape {decl.shape}, got shape {arr.shape}",
                "give one bound for every element or one per element",
            ))
            continue
        arr = _full(arr, decl.shape)
        bad = np.argwhere(~np.isfinite(arr))
        if bad.size:
            idx = tuple(int(i) for i in bad[0])
            problems.append(problem(field, f"{side} must be finite, got {format_number(arr[idx])}{_element(idx)}", "give finite bounds"))
            continue
        arrays.append(arr)
    if problems:
        return None, problems
    low, high = arrays
    bad = np.argwhere(~(low < high))
    if bad.size:
        idx = tuple(int(i) for i in bad[0])
        problems.append(problem(
            field,
            f"must have low < high, got low {format_number(low[idx])} >= high {format_number(high[idx])}{_element(idx)}",
            "swap them or widen the range",
        ))
        return None, problems
    lo_lim, hi_lim = decl.limits
    for side, arr, outside, limit in (("low", low, low < lo_lim, lo_lim), ("high", high, high > hi_lim, hi_lim)):
        bad = np.argwhere(outside)
        if bad.size:
            idx = tuple(int(i) for i in bad[0])
            rule = f">= {format_number(limit)}" if side == "low" else f"<= {format_number(limit)}"
            problems.append(problem(
                field,
                f"must lie within the kind's limits [{format_number(lo_lim)}, {format_number(hi_lim)}], got {side} {format_number(arr[idx])}{_element(idx)}",
                f"keep {side} {rule}",
            ))
    if problems:
        return None, problems
    low.setflags(write=False)
    high.setflags(write=False)
    return (low, high), []


def check_value(
    decl: ParamDecl,
    value: Any,
    low: np.ndarray,
    high: np.ndarray,
    *,
    field: str,
    bounds_field: str,
    is_default: bool = False,
) -> tuple[np.ndarray | None, list[Problem]]:
    """A parameter value as a float64 array of the declared shape, inside [low, high]."""
    problems: list[Problem] = []
    arr = _as_array(value, field, "value", problems)
    if arr is None:
        return None, problems
    if arr.shape != decl.shape:
        problems.append(problem(field, f"must have shape {decl.shape}, got {arr.shape}", decl.shape_fix()))
        return None, problems
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        idx = tuple(int(i) for i in bad[0])
        problems.append(problem(field, f"must be finite, got {format_number(arr[idx])}{_element(idx)}", "give finite numbers"))
        return None, problems
    bad = np.argwhere((arr < low) | (arr > high))
    if bad.size:
        idx = tuple(int(i) for i in bad[0])
        if is_default:
            problems.append(problem(
                field,
                f"has default {format_number(arr[idx])}{_element(idx)} outside its bounds [{format_number(low[idx])}, {format_number(high[idx])}]",
                "give a value inside the bounds",
            ))
            return None, problems
        problems.append(problem(
            field,
            f"must lie within its bounds [{format_number(low[idx])}, {format_number(high[idx])}], got {format_number(arr[idx])}{_element(idx)}",
            f"give a value inside the bounds or widen {bounds_field}",
        ))
        return None, problems
    return np.array(arr, dtype=np.float64, copy=True), []


def check_parameters(
    decls: Sequence[ParamDecl],
    parameters: Mapping[str, Any] | None,
    bounds: Mapping[str, Any] | None,
    *,
    kind: str,
    where: str = "controller",
) -> tuple[dict[str, np.ndarray], dict[str, tuple[np.ndarray, np.ndarray]]]:
    """Validate given values and bounds against ``decls``; fill defaults.

    Returns (values, bounds) for every declared name, in declaration order;
    raises ``ControllerError`` listing every problem found.
    """
    parameters = dict(parameters or {})
    bounds = dict(bounds or {})
    known = [d.name for d in decls]
    problems: list[Problem] = []
    for group, given in (("parameters", parameters), ("bounds", bounds)):
        for name in given:
            if name not in known:
                noun = "parameter" if group == "parameters" else "bounded parameter"
                problems.append(problem(
                    f"{where}.{group}.{name}",
                    f"is not a {noun} of kind {kind!r}",
                    f"{close_match_hint(name, known)}known parameters: {', '.join(sorted(known))}",
                ))
    values: dict[str, np.ndarray] = {}
    resolved: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for decl in decls:
        field = f"{where}.parameters.{decl.name}"
        bounds_field = f"{where}.bounds.{decl.name}"
        pair, found = resolve_bounds(decl, bounds.get(decl.name), field=bounds_field)
        problems.extend(found)
        if pair is None:
            continue
        resolved[decl.name] = pair
        value = parameters.get(decl.name, decl.default)
        if value is None:
            problems.append(problem(field, f"is required for kind {kind!r}", decl.shape_fix()))
            continue
        arr, found = check_value(
            decl, value, *pair, field=field, bounds_field=bounds_field, is_default=decl.name not in parameters
        )
        problems.extend(found)
        if arr is not None:
            values[decl.name] = arr
    if problems:
        raise ControllerError(problems)
    return values, resolved
