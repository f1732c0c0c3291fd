"""z3 back-end: translation, NaN rules, bounds, models, and verdicts against brute-force sampling."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import z3

from kinetome.library.predicates import (
    BoolOp,
    Call,
    Compare,
    Not,
    Predicate,
    evaluate_node,
    parse_predicate,
    prepare_values,
)
from kinetome.library.predicates.smt import ImplicationResult, SmtContext, check_implication, to_z3


SH = {"a": (), "b": (), "v": (2,), "c": (2,)}
C = np.array([0.2, -0.1])
BOUNDS = {"a": (-1.0, 1.0), "b": (-1.0, 1.0), "v": (-1.0, 1.0)}


def _p(text: str, shapes: dict = SH) -> Predicate:
    return parse_predicate(text, shapes)


# ---------------------------------------------------------------------------------
# Translation basics
# ---------------------------------------------------------------------------------
def test_variables_per_component_and_constants_substituted() -> None:
    ctx = SmtContext(constants={"c": C})
    formula = to_z3(_p("norm(v - c) < 0.5 and a > v[1]"), ctx)
    assert isinstance(formula, z3.BoolRef)
    assert [str(x) for x in ctx.variables["v"]] == ["v[0]", "v[1]"]
    assert [str(x) for x in ctx.variables["a"]] == ["a"]
    assert "c" not in ctx.variables  # a constant, not a variable
    # norm introduced one auxiliary with its two defining side constraints
    assert len(ctx.side_constraints) == 2
    # the translation agrees with numpy on a concrete state (here inside the ball, a > v[1])
    s = z3.Solver()
    s.add(formula, *ctx.side_constraints, ctx.variables["v"][0] == 0.25, ctx.variables["v"][1] == 0,
          ctx.variables["a"][0] == 0.5)
    assert s.check() == z3.sat
    s2 = z3.Solver()
    s2.add(formula, *ctx.side_constraints, ctx.variables["v"][0] == 0.9, ctx.variables["v"][1] == 0.9)
    assert s2.check() == z3.unsat


def test_shared_subexpressions_share_auxiliaries() -> None:
    ctx = SmtContext(constants={"c": C})
    to_z3(_p("norm(v - c) < 0.5"), ctx)
    to_z3(_p("norm(v - c) > 0.1"), ctx)
    assert len(ctx.side_constraints) == 2


def test_shape_conflicts_are_errors() -> None:
    ctx = SmtContext({"v": (3,)})
    with pytest.raises(ValueError, match=r"'v' has shape \(3,\) in this context, but a predicate uses it with shape \(2,\)"):
        to_z3(_p("norm(v) < 1"), ctx)
    with pytest.raises(ValueError, match=r"constant 'c' must have shape \(2,\), got \(3,\)"):
        SmtContext({"c": (2,)}, constants={"c": np.zeros(3)})
    with pytest.raises(ValueError, match="constant 'c' must be finite"):
        SmtContext(constants={"c": np.array([np.nan, 0])})
    ctx2 = SmtContext(constants={"c": np.zeros(3)})
    with pytest.raises(ValueError, match=r"constant 'c' has shape \(3,\), but a predicate uses it with shape \(2,\)"):
        to_z3(_p("norm(c) < 1"), ctx2)


# ---------------------------------------------------------------------------------
# Known implications, with the physical envelope as bounds
# ---------------------------------------------------------------------------------
def test_reach_stop_region_implies_next_start() -> None:
    shapes = {"fingertip": (3,), "target": (3,), "qvel": (2,)}
    ctx = SmtContext(constants={"target": np.array([0.3, 0.0, 0.45])})
    stop = parse_predicate("norm(fingertip - target) < 0.02 and all(abs(qvel) <= 0.5)", shapes)
    start = parse_predicate("norm(fingertip - [0.3, 0.0, 0.45]) < 0.05 and max(qvel) < 1", shapes)
    bounds = {"fingertip": (-1, 1), "qvel": (-3, 3)}
    assert check_implication([stop], start, ctx, bounds=bounds).status == "proved"
    tight = parse_predicate("norm(fingertip - [0.3, 0.0, 0.45]) < 0.01", shapes)
    result = check_implication([stop], tight, ctx, bounds=bounds)
    assert result.status == "counterexample" and result.holds_in_float64
    gap = np.linalg.norm(result.model["fingertip"] - [0.3, 0.0, 0.45])
    assert 0.01 <= gap < 0.02
    assert set(result.model) == {"fingertip", "qvel", "target"}


def test_envelope_bounds_decide() -> None:
    # norm(v) <= sqrt(2) on the box [-1, 1]^2 (Pythagoras), so <= 1.5 holds and <= 1.4 does not
    ctx = SmtContext(constants={"c": C})
    assert check_implication([], _p("norm(v) <= 1.5"), ctx, bounds=BOUNDS).status == "proved"
    r = check_implication([], _p("norm(v) <= 1.4"), SmtContext(), bounds=BOUNDS)
    assert r.status == "counterexample"
    assert np.all(np.abs(r.model["v"]) <= 1.0) and np.linalg.norm(r.model["v"]) > 1.4
    # without bounds the same claim is false far away
    assert check_implication([], _p("norm(v) <= 1.5"), SmtContext()).status == "counterexample"


def test_division_by_zero_follows_numpy() -> None:
    # x / y > 0 is false where y == 0 (numpy gives NaN), so it implies y != 0 ...
    assert check_implication([_p("a / b > 0")], _p("b != 0"), SmtContext()).status == "proved"
    # ... and "not (a / b > 0)" holds at b == 0 while "a / b <= 0" does not
    r = check_implication([_p("not a / b > 0")], _p("a / b <= 0"), SmtContext(), bounds=BOUNDS)
    assert r.status == "counterexample" and r.model["b"] == 0.0 and r.holds_in_float64


def test_sqrt_of_negative_follows_numpy() -> None:
    assert check_implication([_p("sqrt(a) < 0.5")], _p("0 <= a < 0.25"), SmtContext()).status == "proved"
    r = check_implication([_p("not sqrt(a) >= 0.5")], _p("a < 0.25 and a >= 0"), SmtContext(), bounds=BOUNDS)
    assert r.status == "counterexample" and r.model["a"] < 0 and r.holds_in_float64


def test_powers_min_max_abs_index() -> None:
    ctx = SmtContext()
    assert check_implication([_p("a ** 2 < 0.25")], _p("abs(a) < 0.5"), ctx).status == "proved"
    assert check_implication([_p("a ** 3 > 0.125")], _p("a > 0.5"), ctx).status == "proved"
    assert check_implication([_p("a ** 0 == 1")], _p("a ** 4 >= 0"), ctx).status == "proved"
    assert check_implication([_p("min(v) > 0.3")], _p("v[0] > 0.3 and v[-1] > 0.3"), ctx).status == "proved"
    assert check_implication([_p("max(a, b, v[0]) < 0")], _p("a + b + v[0] < 0"), ctx).status == "proved"
    r = check_implication([_p("max(a, b) < 0.5")], _p("min(a, b) < 0"), ctx, bounds=BOUNDS)
    assert r.status == "counterexample"
    assert max(r.model["a"], r.model["b"]) < 0.5 and min(r.model["a"], r.model["b"]) >= 0
    assert check_implication([_p("any(v > 0.5)")], _p("max(v) > 0.5"), ctx).status == "proved"
    assert check_implication([_p("all([a, b] < 0)")], _p("max(a, b) < 0"), ctx).status == "proved"


def test_several_premises_are_conjoined() -> None:
    ctx = SmtContext()
    assert check_implication([_p("a > 0.5"), _p("b > 0.5")], _p("a + b > 1"), ctx).status == "proved"
    assert check_implication([_p("a > 0.5")], _p("a + b > 1"), ctx, bounds=BOUNDS).status == "counterexample"


def test_model_is_complete_and_in_bounds() -> None:
    # 'free' is declared but used by no predicate; 'b' is used but unconstrained by the formulas
    ctx = SmtContext({"free": (3,), "a": (), "b": ()})
    bounds = {"free": ([0.0, 1.0, -2.0], [1.0, 3.0, -1.0]), "b": (2.0, 4.0), "a": (None, 10.0),
              "not_declared": (0.0, 1.0)}
    r = check_implication([_p("a > 1")], _p("a > 2 or b != b"), ctx, bounds=bounds)
    assert r.status == "counterexample"
    assert set(r.model) == {"free", "a", "b"}
    assert np.all(r.model["free"] >= [0, 1, -2]) and np.all(r.model["free"] <= [1, 3, -1])
    assert 2.0 <= r.model["b"] <= 4.0 and 1 < r.model["a"] <= 2
    assert all(v.dtype == np.float64 for v in r.model.values())


def test_unknown_on_timeout() -> None:
    # a dense degree-4 system over many variables; 1 ms is far too little for nlsat
    n = 8
    shapes = {f"x{i}": () for i in range(n)}
    terms = " + ".join(f"x{i} ** 4 * x{(i + 1) % n} ** 3" for i in range(n))
    premise = parse_predicate(f"{terms} == 1 and " + " and ".join(f"x{i} * x{(i + 3) % n} > 0.1" for i in range(n)), shapes)
    conclusion = parse_predicate("x0 ** 2 + x1 ** 2 > 0.3", shapes)
    r = check_implication([premise], conclusion, SmtContext(), timeout_ms=1)
    assert r.status == "unknown" and r.model is None and r.reason


@pytest.mark.parametrize(
    "bounds, message",
    [
        ({"a": (1.0, 0.0)}, r"bounds of 'a' must have low <= high, got low=\[1.0\] high=\[0.0\]"),
        ({"v": ([0, 0, 0], 1)}, "bounds low of 'v' must be a number or 2 numbers"),
        ({"v": (0, np.nan)}, "no NaN"),
        ({"a": 1.0}, r"bounds of 'a' must be a \(low, high\) pair, got 1.0"),
    ],
)
def test_bad_bounds(bounds: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        check_implication([_p("a > 0 and v[0] > 0")], _p("a > 1"), SmtContext(), bounds=bounds)


def test_bad_timeout_and_result_invariants() -> None:
    with pytest.raises(ValueError, match="timeout_ms must be a positive integer, got 0"):
        check_implication([], _p("a > 1"), SmtContext(), timeout_ms=0)
    with pytest.raises(ValueError, match="status must be"):
        ImplicationResult("maybe")
    with pytest.raises(ValueError, match="exactly when"):
        ImplicationResult("proved", model={"a": np.zeros(())})


def test_package_import_does_not_load_z3_or_torch() -> None:
    code = (
        "import sys, kinetome.library.predicates as p\n"
        "p.parse_predicate('x > 1', {'x': ()})\n"
        "assert 'z3' not in sys.modules and 'torch' not in sys.modules, sorted(sys.modules)\n"
        "p.check_implication\n"
        "assert 'z3' in sys.modules\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


# ---------------------------------------------------------------------------------
# Verdicts against brute-force sampling of the same predicates (DESIGN.md: "static
# verdicts against brute-force sampling of the same predicates").
# ---------------------------------------------------------------------------------
# (template over threshold t, range of t, which way of t makes the atom looser)
ATOMS = [
    ("norm(v - c) < {t}", 0.2, 1.0, +1),
    ("abs(a) <= {t}", 0.1, 0.9, +1),
    ("max(a, b) < {t}", -0.5, 0.8, +1),
    ("min(v) > {t}", -0.8, 0.3, -1),
    ("a + 2 * b <= {t}", -1.0, 1.0, +1),
    ("a ** 2 + b ** 2 < {t}", 0.1, 1.0, +1),
    ("all(abs(v) <= {t})", 0.2, 0.9, +1),
    ("any(v > {t})", -0.5, 0.7, -1),
    ("not b > {t}", -0.5, 0.5, +1),
    ("(a < {t} or v[0] > 0.5 - {t})", -0.3, 0.6, +1),
    ("-{t} < b < {t}", 0.2, 0.9, +1),
    ("norm(v) <= a + {t}", 0.5, 1.5, +1),
    ("v[1] - a >= 0 - {t}", -0.5, 1.0, +1),
    ("max(abs(v[0]), abs(b)) < {t}", 0.2, 0.9, +1),
    ("sqrt(abs(a)) < {t}", 0.3, 1.0, +1),
    ("a / (b + 2) < {t}", -0.3, 0.6, +1),
    ("norm(v - [0.1, 0.3]) >= {t}", 0.1, 0.6, -1),
    ("abs(v[0]) + abs(v[1]) <= {t}", 0.3, 1.6, +1),
    ("min(a, v[1]) ** 2 <= {t}", 0.05, 0.8, +1),
]
ENVELOPE = ["norm(v) <= 1.5", "abs(b) <= 1", "min(a, b) >= -1"]
N_PAIRS = 120
N_SAMPLES = 20_000
SLACK = 1e-9  # float64 rounding of an exact rational witness; far below any threshold step (0.05)


def _fmt(t: float) -> str:
    return f"{t:.3f}"


def _make_pair(rng: np.random.Generator) -> tuple[str, str]:
    k = int(rng.integers(1, 4))
    picks = rng.choice(len(ATOMS), size=k, replace=False)
    ts = [rng.uniform(ATOMS[i][1], ATOMS[i][2]) for i in picks]
    p = " and ".join(ATOMS[i][0].format(t=_fmt(t)) for i, t in zip(picks, ts))
    q_atoms = []
    for i, t in zip(picks, ts):
        if rng.random() < 0.7:
            delta = float(rng.choice([-0.15, -0.05, 0.0, 0.05, 0.3]))  # < 0 tightens, > 0 loosens
            q_atoms.append(ATOMS[i][0].format(t=_fmt(t + ATOMS[i][3] * delta)))
    if rng.random() < 0.3 or not q_atoms:
        if rng.random() < 0.5:
            q_atoms.append(ENVELOPE[int(rng.integers(len(ENVELOPE)))])
        else:
            j = int(rng.integers(len(ATOMS)))
            q_atoms.append(ATOMS[j][0].format(t=_fmt(rng.uniform(ATOMS[j][1], ATOMS[j][2]))))
    return p, " and ".join(q_atoms)


def _margin(node, arrays) -> np.ndarray:
    """Signed robustness (> 0 holds, < 0 fails, NaN operands fail): how far a state is from flipping."""
    if isinstance(node, Compare):
        out = None
        for a, op, b in node.links():
            x, y = evaluate_node(a, arrays), evaluate_node(b, arrays)
            x, y = np.broadcast_arrays(*(z.reshape(z.shape + (1,) * (max(x.ndim, y.ndim) - z.ndim)) for z in (x, y)))
            if op in ("<", "<="):
                m = y - x
            elif op in (">", ">="):
                m = x - y
            elif op == "==":
                m = -np.abs(x - y)
            else:
                m = np.abs(x - y)
            m = np.where(np.isnan(m), -np.inf, m)
            out = m if out is None else np.minimum(out, m)
        return out
    if isinstance(node, BoolOp):
        parts = [_margin(x, arrays) for x in node.items]
        combine = np.minimum if node.op == "and" else np.maximum
        out = parts[0]
        for p in parts[1:]:
            out = combine(out, p)
        return out
    if isinstance(node, Not):
        return -_margin(node.operand, arrays)
    if isinstance(node, Call) and node.func in ("all", "any"):
        m = _margin(node.args[0], arrays)
        flat = m.reshape(m.shape[0], -1)
        return flat.min(axis=1) if node.func == "all" else flat.max(axis=1)
    raise TypeError(type(node).__name__)


def test_verdicts_agree_with_brute_force_sampling() -> None:
    rng = np.random.default_rng(2024)
    seen = {"proved": 0, "counterexample": 0, "unknown": 0}
    replayed = 0
    for _ in range(N_PAIRS):
        p_text, q_text = _make_pair(rng)
        P, Q = _p(p_text), _p(q_text)
        ctx = SmtContext({"a": (), "b": (), "v": (2,)}, constants={"c": C})
        result = check_implication([P], Q, ctx, bounds=BOUNDS, timeout_ms=5000)
        seen[result.status] += 1
        samples = {
            "a": rng.uniform(-1, 1, N_SAMPLES),
            "b": rng.uniform(-1, 1, N_SAMPLES),
            "v": rng.uniform(-1, 1, (N_SAMPLES, 2)),
            "c": C,
        }
        in_p = P.evaluate(samples)
        breaks = in_p & ~Q.evaluate(samples)
        if result.status == "proved":
            # soundness: a proven handoff never has a sampled violation
            assert not breaks.any(), f"proved, but sampled violation for P: {p_text} | Q: {q_text}"
        elif result.status == "counterexample":
            model = result.model
            assert set(model) == {"a", "b", "v", "c"}
            assert all(-1 <= float(x) <= 1 for name in "abv" for x in np.ravel(model[name]))
            arrays, _ = prepare_values({k: np.asarray(x)[None, ...] for k, x in model.items()}, SH)
            assert _margin(P.root, arrays)[0] >= -SLACK, f"model outside P: {p_text} | {model}"
            assert _margin(Q.root, arrays)[0] <= SLACK, f"model inside Q: {q_text} | {model}"
            replayed += bool(result.holds_in_float64)
    print(f"\nSMT vs brute force over {N_PAIRS} pairs: {seen}, counterexamples exact in float64: {replayed}")
    # the seeded mix exercises both verdicts substantially
    assert seen["proved"] >= 20 and seen["counterexample"] >= 20


POINT_EXPRESSIONS = [
    "norm(v - c) < 0.75 and a > v[1]",
    "a / b >= 0.5 or not a / b < -1",
    "sqrt(a) + sqrt(b) <= 1 or a != b",
    "max(a, v[0]) ** 2 == 0.25 or min(v) ** 3 > a",
    "all(abs(v - a) <= 1) and any([a, b] == 0)",
    "not (0 <= a < b <= 1) and norm(v) >= 0.5",
    "min(v, b)[1] / v[0] > 0 or max(v) - min(a, b) == 1.5",
    "-a ** 2 < b and (v - [0.5, -1])[0] * 2 != 1",
]
GRID = np.array([-1.0, -0.5, 0.0, 0.5, 1.0, 2.0])


@pytest.mark.parametrize("text", POINT_EXPRESSIONS)
def test_formula_agrees_with_numpy_at_points(text: str) -> None:
    """With every variable pinned to a point, the formula is satisfiable exactly where numpy says true.

    Grid values and literals are dyadic, so float64 arithmetic is exact except for
    sqrt and norm, whose irrational results never tie with a dyadic bound.
    """
    rng = np.random.default_rng(11)
    pred = _p(text)
    ctx = SmtContext({"a": (), "b": (), "v": (2,)}, constants={"c": np.array([0.25, -0.5])})
    formula = to_z3(pred, ctx)
    points = rng.choice(GRID, size=(60, 4))
    values = {"a": points[:, 0], "b": points[:, 1], "v": points[:, 2:], "c": np.array([0.25, -0.5])}
    expected = pred.evaluate(values)
    assert 0 < expected.sum() < len(points)  # both outcomes occur
    terms = [*ctx.components("a"), *ctx.components("b"), *ctx.components("v")]
    for point, want in zip(points, expected):
        solver = z3.Solver()
        solver.add(formula, *ctx.side_constraints, *(t == z3.RealVal(str(x)) for t, x in zip(terms, point)))
        assert (solver.check() == z3.sat) == bool(want), (text, point.tolist())
