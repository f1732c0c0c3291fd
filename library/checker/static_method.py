"""Static method (z3): can a state satisfy A's stop region and the envelope but not B's initiation set?

UNSAT proves containment: whenever A stops (by ``stops_when``, not by timeout)
B accepts. Containment alone never makes a handoff compose: A must also reach its
stop region in time (liveness), which simulation or valid option models show. Derived quantities are free variables within their envelope
(``envelope.py``), so a proof is sound; a solver model is then only a
candidate counterexample.

Rule for a *confirmed* static counterexample (see docs/checker in README):
a physical state is built from the solver model, either the model's own
qpos/qvel or the nominal start pose with only the raw components the
predicates read set to the model's values; MuJoCo computes its named state
(reset, write, forward), which must lie inside the physical envelope, not be
an env-terminal state (a terminal state ends an episode before any stop is
recorded), satisfy A's ``stops_when`` and violate B's ``starts_when`` under
the numpy back-end. Predicates that read actuator commands (``ctrl`` sources)
are never confirmed this way. Such a state is one A's contract allows it to
stop in and B refuses: the contracts do not compose. It makes the handoff
``breaks`` only when A's execution reaches such states (the simulation refuses
stops on the same clause of B); otherwise it is a contract gap. Every other
model stays a candidate.

Timeouts are outside the proof: a skill that reaches ``max_steps`` hands
over outside its stop region; the simulation counts how often.
"""

from __future__ import annotations

import dataclasses
from typing import Any, Callable, Mapping

import numpy as np

from ..safety import PROOF_SCOPE
from .envelope import ASSUMED, Envelope, Premise, physical_envelope, raw_names, relaxed_names
from .premises import premises_used
from .evidence import Counterexample, Evidence, Handoff, counterexample_from
from .registry import checker_method
from .verdict import Verdict

__all__ = ["static_method", "bind_parameters", "prove_handoff", "start_box", "StaticOutcome"]


def _rename(node: Any, mapping: Mapping[str, str]) -> Any:
    from ..predicates import Name, Node

    if isinstance(node, Name):
        return Name(mapping.get(node.id, node.id))
    changes = {}
    for f in dataclasses.fields(node):
        value = getattr(node, f.name)
        if isinstance(value, Node):
            changes[f.name] = _rename(value, mapping)
        elif isinstance(value, tuple) and value and all(isinstance(x, Node) for x in value):
            changes[f.name] = tuple(_rename(x, mapping) for x in value)
    return dataclasses.replace(node, **changes) if changes else node


def bind_parameters(pred: Any, parameters: Mapping[str, np.ndarray], state_names: set[str], prefix: str) -> tuple[Any, dict[str, np.ndarray]]:
    """``pred`` with the skill's parameters renamed ``prefix + name``, and their values as constants.

    Two skills may both have a parameter ``target`` with different values; the
    prefixes keep them apart in one solver context.
    """
    from ..predicates import Predicate

    params = sorted(n for n in pred.names if n not in state_names)
    missing = [n for n in params if n not in parameters]
    if missing:
        raise ValueError(f"predicate {pred} names {missing}, which are neither state quantities nor parameters")
    mapping = {n: prefix + n for n in params}
    shapes = {mapping.get(n, n): s for n, s in pred.shapes}
    renamed = Predicate(_rename(pred.root, mapping), shapes)
    constants = {prefix + n: np.asarray(parameters[n], dtype=np.float64).reshape(pred.shape_of(n)) for n in params}
    return renamed, constants


@dataclasses.dataclass(frozen=True, eq=False)
class StaticOutcome:
    """Result of one implication query set: status, solver models (state dicts), solver calls."""

    status: str  # proved | counterexample | unknown
    models: tuple[dict[str, np.ndarray], ...] = ()
    reason: str = ""
    calls: int = 0


def _query(premises: list, conclusion: Any, *, declare: dict, constants: dict, bounds: Mapping, timeout_ms: int) -> Any:
    from ..predicates.smt import SmtContext, check_implication

    ctx = SmtContext(declare, constants=constants)
    return check_implication(premises, conclusion, ctx, bounds=bounds, timeout_ms=timeout_ms)


def _blocking(model: Mapping[str, np.ndarray], names: list[str], layout: Any, bounds: Mapping) -> Any:
    """A predicate false at (and near) ``model``: some component of ``names`` moves by 5% of its range."""
    from ..predicates import parse_predicate
    from .envelope import component_text

    parts = []
    for name in names:
        if name not in model:
            continue
        q = layout[name]
        value = np.asarray(model[name], dtype=np.float64).reshape(-1)
        low, high = bounds.get(name, (np.full(q.size, -np.inf), np.full(q.size, np.inf)))
        for k, v in enumerate(value):
            width = high[k] - low[k]
            step = 0.05 * width if np.isfinite(width) and width > 0 else 0.05 * max(1.0, abs(v))
            if not np.isfinite(width) or width > 0:
                c = component_text(name, q.shape, k)
                parts.append(f"{c} >= {float(v + step)!r} or {c} <= {float(v - step)!r}")
    if not parts:
        return None
    return parse_predicate(" or ".join(parts), layout.shapes(), what="blocking clause")


def _with_margin(pred: Any) -> Any | None:
    """``pred`` with each plain ``x < c`` / ``x > c`` widened by 10% of |c| (at least 0.001).

    A state violating the widened predicate violates ``pred`` by that margin,
    so solver models sit clear of the boundary. None when nothing changed.
    """
    from ..predicates import BoolOp, Call, Compare, Index, Num, Predicate

    changed = False

    def widen(node: Any) -> Any:
        nonlocal changed
        if isinstance(node, Compare) and len(node.ops) == 1:
            (a, b), op = node.operands, node.ops[0]
            if op in ("<", "<=", ">", ">=") and isinstance(b, Num) and not isinstance(a, Num):
                m = 0.1 * max(abs(b.value), 0.01)
                changed = True
                return Compare((a, Num(b.value + m if op in ("<", "<=") else b.value - m)), node.ops)
            if op in ("<", "<=", ">", ">=") and isinstance(a, Num) and not isinstance(b, Num):
                m = 0.1 * max(abs(a.value), 0.01)
                changed = True
                return Compare((Num(a.value - m if op in ("<", "<=") else a.value + m), b), node.ops)
            return node
        if isinstance(node, BoolOp):
            return BoolOp(node.op, tuple(widen(x) for x in node.items))
        if isinstance(node, Call) and node.func in ("all", "any"):
            return Call(node.func, tuple(widen(x) for x in node.args))
        if isinstance(node, Index):
            return Index(widen(node.target), node.index)
        return node  # under not(...) widening would narrow: leave it

    root = widen(pred.root)
    return Predicate(root, dict(pred.shapes)) if changed else None


def prove_handoff(
    premises: list,
    conclusion: Any,
    *,
    layout: Any,
    constants: dict,
    bounds: Mapping,
    timeout_ms: int,
    max_models: int,
    judge: Callable[[dict[str, np.ndarray]], bool] | None = None,
) -> StaticOutcome:
    """Ask z3 whether ``premises`` imply ``conclusion`` within ``bounds``.

    On failure, look for up to ``max_models`` models spread over the top-level
    clauses of the conclusion: per clause, a state violating it by a margin if
    there is one (else at the boundary), then more states at least 5% of a range
    away from the earlier ones (blocking clauses). ``judge(model)`` says whether
    a model is worth more of its kind (a confirmed counterexample); when it says
    no, the search moves on to the next clause, which keeps the number of solver
    calls small for relaxed (unconfirmable) handoffs.
    """
    declare = {n: s for n, s in layout.shapes().items() if n in ("qpos", "qvel")}
    kw = dict(declare=declare, constants=constants, bounds=bounds, timeout_ms=timeout_ms)
    first = _query(premises, conclusion, **kw)
    calls = 1
    if first.status == "proved":
        return StaticOutcome("proved", calls=calls)
    if first.status == "unknown":
        return StaticOutcome("unknown", reason=first.reason, calls=calls)
    models: list[dict] = []
    for clause in conclusion.clauses():
        if len(models) >= max_models:
            break
        names = sorted(n for n in clause.names if n in layout)
        wide = _with_margin(clause)
        blocks: list = []
        while len(models) < max_models:
            res = None
            for target in ([wide] if wide is not None else []) + [clause]:
                res = _query([*premises, *blocks], target, **kw)
                calls += 1
                if res.status == "counterexample":
                    break
            if res is None or res.status != "counterexample":
                break
            models.append(res.model)
            if judge is not None and not judge(res.model):
                break
            block = _blocking(res.model, names, layout, bounds)
            if block is None:
                break
            blocks.append(block)
    if not models:
        models = [first.model]
        if judge is not None:
            judge(first.model)
    return StaticOutcome("counterexample", tuple(models[: max(1, max_models)]), calls=calls)


def _reads_ctrl(rig: Any, names: set[str]) -> bool:
    return any(rig.sources.get(n) is not None and rig.sources[n].field == "ctrl" for n in names)


def _nominal(ctx: Any) -> tuple[np.ndarray, np.ndarray]:
    start = ctx.start
    if start is not None and hasattr(start, "nominal"):
        return start.nominal(ctx.rig.model)
    return ctx.rig.model.qpos0.copy(), np.zeros(ctx.rig.model.nv)


def _nominal_state(ctx: Any) -> dict[str, np.ndarray]:
    if "nominal_state" not in ctx.cache:
        qpos, qvel = _nominal(ctx)
        ctx.cache["nominal_state"] = ctx.named_state(np.asarray(qpos)[None], np.asarray(qvel)[None])
    return ctx.cache["nominal_state"]


def components_read(*preds: Any) -> dict[str, set[int] | None]:
    """name -> flat components the predicates read (None: all of them), from ``x[i]`` indexing."""
    from ..predicates import Index, Name

    out: dict[str, set[int] | None] = {}

    def mark(name: str, comps: set[int] | None) -> None:
        if name in out and out[name] is None:
            return
        out[name] = None if comps is None else (out.get(name) or set()) | comps

    def visit(node: Any) -> None:
        if isinstance(node, Index) and isinstance(node.target, Name) and node.index >= 0:
            mark(node.target.id, {int(node.index)})
            return
        if isinstance(node, Name):
            mark(node.id, None)
            return
        for child in node.children():
            visit(child)

    for p in preds:
        visit(p.root)
    return out


def _realisations(ctx: Any, model: Mapping[str, np.ndarray], used: dict[str, set[int] | None]) -> list[tuple[str, dict[str, np.ndarray]]]:
    """Physical states for a solver model, as MuJoCo computes their named state (batch of one each).

    Two tries: the model's own qpos/qvel; and the nominal pose with only the raw
    components the predicates read set to the model's values (the solver leaves
    the others arbitrary, e.g. a walker sunk into the floor).
    """
    nq, nv = ctx.rig.model.nq, ctx.rig.model.nv
    tries: list[tuple[str, np.ndarray, np.ndarray]] = []
    if "qpos" in model and "qvel" in model:
        qpos = np.asarray(model["qpos"], dtype=np.float64).reshape(-1)
        qvel = np.asarray(model["qvel"], dtype=np.float64).reshape(-1)
        if qpos.size == nq and qvel.size == nv:
            tries.append(("solver state", qpos, qvel))
    qpos, qvel = (np.array(x, dtype=np.float64) for x in _nominal(ctx))
    changed = False
    for name, comps in sorted(used.items()):
        if name not in model or name not in raw_names(ctx.rig):
            continue
        src = ctx.rig.sources[name]
        target = qpos if src.field == "qpos" else qvel
        values = np.asarray(model[name], dtype=np.float64).reshape(-1)
        for k in range(values.size) if comps is None else sorted(comps):
            target[src.index[k]] = values[k]
        changed = True
    if changed:
        tries.append(("nominal pose with the solver's values", qpos, qvel))
    return [(label, ctx.named_state(q[None], v[None])) for label, q, v in tries]


def _as_batch(model: Mapping[str, np.ndarray], layout: Any) -> dict[str, np.ndarray]:
    return {n: np.asarray(v, dtype=np.float64)[None] for n, v in model.items() if n in layout}


class _Judge:
    """Turns solver models into counterexamples: confirmed (realised, see module doc) or candidates."""

    def __init__(self, ctx: Any, *, a: Any, b: Any, envelope: Envelope, accept_start: Any = None):
        self.ctx, self.a, self.b, self.envelope, self.accept_start = ctx, a, b, envelope, accept_start
        self.used = components_read(b.starts_when, *([a.stops_when] if a is not None else []))
        self.names = tuple(ctx.layout.names)
        self.confirmed: list[Counterexample] = []
        self.candidates: list[Counterexample] = []

    def _holds(self, realised: dict[str, np.ndarray]) -> bool:
        a, b, ctx = self.a, self.b, self.ctx
        inside = bool(self.envelope.contains(realised)[0])
        alive = not bool(np.asarray(ctx.rig.terminated(realised))[0])
        in_a = True if a is None else bool(a.stops_when.evaluate({**realised, **a.parameters})[0])
        in_start = True if self.accept_start is None else bool(self.accept_start(realised))
        refused = not bool(b.starts_when.evaluate({**realised, **b.parameters})[0])
        return inside and alive and in_a and in_start and refused

    def __call__(self, model: dict[str, np.ndarray]) -> bool:
        i = len(self.confirmed) + len(self.candidates) + 1
        ctx, b = self.ctx, self.b
        if not _reads_ctrl(ctx.rig, set(self.used)):
            for label, realised in _realisations(ctx, model, self.used):
                if self._holds(realised):
                    self.confirmed.append(
                        counterexample_from(
                            b.starts_when, realised, 0, parameters=b.parameters, names=self.names, source="z3",
                            confirmed=True, note=f"solver model {i}, realised in MuJoCo ({label})",
                        )
                    )
                    return True
        # The solver's (relaxed) values; names a clause query left out come from the nominal pose.
        state = {**_nominal_state(ctx), **_as_batch(model, ctx.layout)}
        self.candidates.append(
            counterexample_from(
                b.starts_when, state, 0, parameters=b.parameters, names=tuple(n for n in self.names if n in state),
                source="z3", confirmed=False, note=f"solver model {i} (relaxed; not realised)",
            )
        )
        return False


def _timeout_note(a: Any) -> str:
    return (
        f"{a.ref} can time out (max_steps={a.max_steps}); containment says nothing about whether it stops "
        f"in time, which only simulation or valid option models show"
    )


def _static_handoff(ctx: Any, j: Handoff) -> Evidence:
    a, b = ctx.source_skill(j), ctx.target_skill(j)
    layout = ctx.layout
    state = set(layout.names)
    envelope = physical_envelope(ctx.rig, a.skill.limits, owner=a.ref)
    stop_a, const_a = bind_parameters(a.stops_when, a.parameters, state, "_a_")
    start_b, const_b = bind_parameters(b.starts_when, b.parameters, state, "_b_")
    judge = _Judge(ctx, a=a, b=b, envelope=envelope)
    constants = {**const_a, **const_b}
    outcome = prove_handoff(
        [stop_a, *envelope.premises], start_b, layout=layout, constants=constants, bounds=envelope.bounds,
        timeout_ms=ctx.options.timeout_ms, max_models=max(1, ctx.options.max_counterexamples), judge=judge,
    )
    used = set(a.stops_when.names) | set(b.starts_when.names)
    for p in envelope.premises:
        used |= set(p.names)
    relaxed = relaxed_names(ctx.rig, used & state)
    details = {
        "relaxed": relaxed,
        "envelope": list(envelope.assumptions),
        "timeouts": _timeout_note(a),
        "solver_calls": outcome.calls,
        "timeout_ms": ctx.options.timeout_ms,
    }
    relax_text = f" (relaxed: {', '.join(relaxed)})" if relaxed else ""
    # A handoff's static evidence is about containment only: it never decides a verdict alone.
    if outcome.status == "proved":
        declare = {n: s for n, s in layout.shapes().items() if n in ("qpos", "qvel")}
        core = premises_used(stop_a, start_b, envelope.items, declare=declare, constants=constants, timeout_ms=ctx.options.timeout_ms)
        core = list(envelope.items) if core is None else core  # z3 gave no core: every premise counts
        listed = "; ".join(f"{p.label} [{p.kind}]" for p in core) or "none (the predicates alone)"
        reason = (
            f"containment proved ({PROOF_SCOPE}): {a.ref} stops_when implies {b.ref} starts_when{relax_text}; "
            f"premises used: {listed}"
        )
        details = {**details, "containment": "proved", "premises": [{"label": p.label, "kind": p.kind} for p in core]}
        return Evidence("static", Verdict.UNSURE, reason, details=details, premises=tuple(core))
    if outcome.status == "unknown":
        reason = f"z3 could not decide containment ({outcome.reason or 'unknown'}) within {ctx.options.timeout_ms} ms"
        return Evidence("static", Verdict.UNSURE, reason, details={**details, "containment": "unknown"})
    confirmed, candidates = judge.confirmed, judge.candidates
    if confirmed:
        return Evidence(
            "static", Verdict.UNSURE,
            f"containment fails: a state {a.ref} may stop in (realised in MuJoCo, inside the envelope) that {b.ref} refuses",
            counterexamples=tuple(confirmed), candidates=tuple(candidates), details={**details, "containment": "counterexample"},
        )
    return Evidence(
        "static", Verdict.UNSURE,
        f"candidate counterexample to containment{relax_text}: not realised as a physical state",
        candidates=tuple(candidates), details={**details, "containment": "candidate"},
    )


# -- entry: the start distribution as a box over raw state ------------------------------------


def _noise_box(noise: Any, model: Any, kind: str, size: int) -> np.ndarray | None:
    """Half-widths of a noise spec, or None when it is unbounded (gaussian with scale > 0)."""
    if noise is None:
        return np.zeros(size)
    scale = np.asarray(noise.per_coordinate(model, kind), dtype=np.float64)
    if noise.distribution == "uniform":
        return scale
    return None if np.any(scale > 0) else np.zeros(size)


def start_box(start: Any, rig: Any) -> dict[str, tuple[np.ndarray, np.ndarray]] | None:
    """A box (name -> flat (low, high)) holding every state the start distribution can give, or None.

    Uniform noise around the nominal pose, clipped into limited joint ranges;
    quaternions that get noise may be anything in [-1, 1]; box constraints over
    qpos/qvel or other quantities narrow it (they only reject states). Gaussian
    noise or the rig's default start (unknown form) give None.
    """
    if start is None or not hasattr(start, "nominal"):
        return None
    import mujoco

    model = rig.model
    q0, v0 = start.nominal(model)
    sq = _noise_box(getattr(start, "qpos_noise", None), model, "qpos", model.nq)
    sv = _noise_box(getattr(start, "qvel_noise", None), model, "qvel", model.nv)
    if sq is None or sv is None:
        return None
    qlow, qhigh = q0 - sq, q0 + sq
    for jnt in range(model.njnt):
        adr = int(model.jnt_qposadr[jnt])
        jtype = int(model.jnt_type[jnt])
        if jtype in (mujoco.mjtJoint.mjJNT_HINGE, mujoco.mjtJoint.mjJNT_SLIDE):
            if model.jnt_limited[jnt]:
                lo, hi = model.jnt_range[jnt]
                qlow[adr], qhigh[adr] = np.clip(qlow[adr], lo, hi), np.clip(qhigh[adr], lo, hi)
        else:
            s = adr + (3 if jtype == mujoco.mjtJoint.mjJNT_FREE else 0)
            if np.any(sq[s : s + 4] > 0):
                qlow[s : s + 4], qhigh[s : s + 4] = -1.0, 1.0
    raw: dict[str, tuple[np.ndarray, np.ndarray]] = {"__qpos": (qlow, qhigh), "__qvel": (v0 - sv, v0 + sv)}
    out: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    # Map the raw boxes onto layout quantities read from qpos/qvel.
    for name, src in rig.sources.items():
        if src.field in ("qpos", "qvel") and not rig.layout[name].derived:
            low, high = raw[f"__{src.field}"]
            idx = list(src.index)
            out[name] = (low[idx].copy(), high[idx].copy())
    for c in getattr(start, "constraints", ()):
        if hasattr(c, "low") and c.quantity in rig.layout:
            low, high = out.get(c.quantity, (np.full(len(c.low), -np.inf), np.full(len(c.low), np.inf)))
            out[c.quantity] = (np.maximum(low, c.low), np.minimum(high, c.high))
    return out


def _merge_bounds(a: Mapping, b: Mapping) -> dict:
    out = {k: (np.asarray(lo, dtype=np.float64).copy(), np.asarray(hi, dtype=np.float64).copy()) for k, (lo, hi) in a.items()}
    for k, (lo, hi) in b.items():
        if k in out:
            out[k] = (np.maximum(out[k][0], lo), np.minimum(out[k][1], hi))
        else:
            out[k] = (np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64))
    return out


def _static_entry(ctx: Any, j: Handoff) -> Evidence | None:
    box = start_box(ctx.start, ctx.rig)
    if box is None:
        return None
    b = ctx.target_skill(j)
    layout = ctx.layout
    envelope = physical_envelope(ctx.rig, None)
    bounds = _merge_bounds(envelope.bounds, box)
    if any(np.any(lo > hi) for lo, hi in bounds.values()):
        return Evidence("static", Verdict.UNSURE, "the initial-state box lies outside the physical envelope; sampling decides")
    start_b, const_b = bind_parameters(b.starts_when, b.parameters, set(layout.names), "_b_")
    in_box = Envelope((Premise("initial-state box", ASSUMED, box),))

    def accept_start(values: Mapping[str, np.ndarray]) -> bool:
        ok = bool(in_box.contains(values)[0])
        for c in getattr(ctx.start, "constraints", ()):
            if c.quantity in values:
                ok &= bool(c.accept(np.asarray(values[c.quantity], dtype=np.float64), ctx.rig.model)[0])
        return ok

    judge = _Judge(ctx, a=None, b=b, envelope=envelope, accept_start=accept_start)
    outcome = prove_handoff(
        list(envelope.premises), start_b, layout=layout, constants=const_b, bounds=bounds,
        timeout_ms=ctx.options.timeout_ms, max_models=max(1, ctx.options.max_counterexamples), judge=judge,
    )
    relaxed = relaxed_names(ctx.rig, set(b.starts_when.names) & set(layout.names))
    details = {"relaxed": relaxed, "start_box": {k: [lo.tolist(), hi.tolist()] for k, (lo, hi) in box.items()}, "solver_calls": outcome.calls}
    relax_text = f" (relaxed: {', '.join(relaxed)})" if relaxed else ""
    if outcome.status == "proved":
        reason = f"proved ({PROOF_SCOPE}): every state of the initial-state box satisfies {b.ref} starts_when{relax_text}"
        return Evidence("static", Verdict.COMPOSES, reason, details=details)
    if outcome.status == "unknown":
        return Evidence("static", Verdict.UNSURE, f"z3 could not decide ({outcome.reason or 'unknown'})", details=details)
    confirmed, candidates = judge.confirmed, judge.candidates
    # A start distribution is a probability: a refused start state is listed, sampling gives the verdict.
    what = "initial states inside the initial-state box" if confirmed else "candidate initial states"
    return Evidence(
        "static",
        Verdict.UNSURE,
        f"{b.ref} refuses some {what}; sampling measures how often",
        counterexamples=tuple(confirmed),
        candidates=tuple(candidates),
        details=details,
    )


def _question(a: Any, b: Any) -> tuple:
    """What a handoff's static check depends on: a chain that repeats a pair asks it once."""
    def params(s: Any) -> tuple:
        return tuple((k, np.asarray(v).tobytes()) for k, v in sorted(s.parameters.items()))

    limits = getattr(a.skill, "limits", None)
    return (a.ref, str(a.stops_when), params(a), repr(limits), b.ref, str(b.starts_when), params(b))


@checker_method("static", cost=10, summary="z3: containment, A's stop region and the physical envelope imply B's starts_when")
def static_method(ctx: Any, checked: list[Handoff]) -> dict[int, Evidence]:
    """z3: containment, A's stop region and the physical envelope imply B's starts_when."""
    out: dict[int, Evidence] = {}
    for j in checked:
        if j.is_entry:
            ev = _static_entry(ctx, j)
        else:
            key = ("static",) + _question(ctx.source_skill(j), ctx.target_skill(j))
            if key not in ctx.cache:
                ctx.cache[key] = _static_handoff(ctx, j)
            ev = ctx.cache[key]
        if ev is not None:
            out[j.index] = ev
    return out
