"""``plan_controller``: kind + context + spec values -> every parameter checked, without torch.

``build_controller`` turns a plan into the torch controller; validating and
registering a spec need only the plan (values in declaration order, bounds,
inputs), so they never import torch.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np

from ..errors import Problem
from .context import ControllerContext
from .errors import ControllerError, problem
from .kind import log_std_decl
from .params import ParamDecl, check_parameters, format_number, resolve_bounds
from .registry import kind_class, kind_declaration

if TYPE_CHECKING:
    from .base import Controller

__all__ = ["ControllerPlan", "plan_controller", "build_controller"]


@dataclass(frozen=True)
class ControllerPlan:
    """A controller before torch: every value checked, in declaration order (``log_std`` last)."""

    kind: str
    context: ControllerContext
    settings: Mapping[str, Any]
    decls: tuple[ParamDecl, ...]
    values: Mapping[str, np.ndarray]
    bounds: Mapping[str, tuple[np.ndarray, np.ndarray]]
    inputs: tuple[str, ...]
    needs: tuple[str, ...]


def _log_std_from(
    std: Any, bounds: Any, context: ControllerContext, *, where: str
) -> tuple[np.ndarray | None, list[Problem]]:
    """log of a user exploration std (a number or one per actuator), checked against log_std's bounds."""
    field = f"{where}.exploration_std"
    decl = log_std_decl(context)
    try:
        arr = np.asarray(std, dtype=np.float64)
    except (TypeError, ValueError):
        return None, [problem(field, f"must be a positive number or one per actuator, got {std!r}", "give e.g. 0.1")]
    if arr.shape not in ((), decl.shape):
        return None, [problem(field, f"must be a number or have shape {decl.shape}, got shape {arr.shape}", "give one std for all actuators or one per actuator")]
    arr = np.broadcast_to(arr, decl.shape)
    bad = np.flatnonzero(~(np.isfinite(arr) & (arr > 0)))
    if bad.size:
        i = int(bad[0])
        return None, [problem(field, f"must be positive and finite, got {format_number(arr[i])} at element {i}", "give e.g. 0.1")]
    pair, found = resolve_bounds(decl, bounds, field=f"{where}.bounds.log_std")
    if pair is None:
        return None, found
    log = np.log(arr)
    low, high = pair
    bad = np.flatnonzero((log < low) | (log > high))
    if bad.size:
        i = int(bad[0])
        return None, [problem(
            field,
            f"must lie within [{format_number(np.exp(low[i]))}, {format_number(np.exp(high[i]))}] (exp of the log_std bounds), "
            f"got {format_number(arr[i])} at element {i}",
            f"give a std inside that range or widen {where}.bounds.log_std",
        )]
    return np.array(log, dtype=np.float64), []


def plan_controller(
    kind: str,
    context: ControllerContext,
    *,
    parameters: Mapping[str, Any] | None = None,
    bounds: Mapping[str, Any] | None = None,
    settings: Mapping[str, Any] | None = None,
    exploration_std: Any = None,
    where: str = "controller",
) -> ControllerPlan:
    """The checked plan of a controller of ``kind`` for ``context`` (see ``build_controller``).

    ``parameters``: name -> array-like; missing names take the declared default
    (a missing required one is an error). ``bounds``: name -> (low, high), each a
    number or one per element, inside the kind's hard limits. ``exploration_std``:
    a number or one per actuator (default 10 % of each actuator's half-range);
    or give ``log_std`` in ``parameters`` instead. Every problem is reported at
    once in a ``ControllerError`` whose fields start with ``where``.
    """
    cls = kind_declaration(kind, where=where)
    resolved = cls.resolve_settings(context, settings, where=where)
    decls = (*cls._declare(context, resolved), log_std_decl(context))
    params = dict(parameters or {})
    problems: list[Problem] = []
    if exploration_std is not None:
        if "log_std" in params:
            problems.append(problem(
                f"{where}.exploration_std",
                "conflicts with the given log_std parameter",
                "give exploration_std or parameters.log_std, not both",
            ))
        else:
            log, found = _log_std_from(exploration_std, (bounds or {}).get("log_std"), context, where=where)
            problems.extend(found)
            if log is not None:
                params["log_std"] = log
    try:
        values, resolved_bounds = check_parameters(decls, params, bounds, kind=kind, where=where)
    except ControllerError as exc:
        # A bad exploration_std already reported its log_std bounds problem once.
        seen = {(p.field, p.message) for p in problems}
        problems.extend(p for p in exc.problems if (p.field, p.message) not in seen)
        values, resolved_bounds = {}, {}
    if problems:
        raise ControllerError(problems)
    ordered = {d.name: values[d.name] for d in decls}
    return ControllerPlan(
        kind, context, resolved, decls, ordered, resolved_bounds,
        tuple(cls.reads(context, resolved)), tuple(cls.requires(context, resolved)),
    )


def build_controller(kind: str, context: ControllerContext, **spec: Any) -> "Controller":
    """A controller of ``kind`` for ``context``, ready to act (imports torch).

    Keywords as ``plan_controller``: ``parameters`` (name -> array-like; missing
    names take the declared default), ``bounds`` (name -> (low, high)),
    ``settings``, ``exploration_std`` (a number or one per actuator) and ``where``
    (the field prefix of problems). Every problem is reported at once in a
    ``ControllerError``.
    """
    plan = plan_controller(kind, context, **spec)
    cls = kind_class(kind, where=spec.get("where", "controller"))
    return cls(context, plan.settings, plan.decls, plan.values, plan.bounds)
