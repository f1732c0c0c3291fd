"""Region bounds (balls and boxes) decide pair facts before z3: never a wrong proof, and a kept z3 answer
is reused only for the very same question.

Outside references: z3 itself as an independent decision procedure for the same questions, and
Monte Carlo sampling of the stop region (brute force): a proof must hold on every sampled state.
"""

from __future__ import annotations

import numpy as np
import pytest

from kinetome.library.planning import IMPOSSIBLE, OPEN, PROVED
from kinetome.library.planning.links import SolverMemo, _solve, region_fact
from kinetome.library.planning.region_bounds import atoms_of, fixed_values, region_verdict, with_bounds
from kinetome.library.predicates import parse_predicate

SHAPES = {"v": (2,), "x": (), "w": (2,), "c": ()}


def _pred(text: str):
    return parse_predicate(text, SHAPES, what="test")


def _vec(a) -> str:
    return "[" + ", ".join(f"{float(t):.3f}" for t in a) + "]"


def _region(rng: np.random.Generator) -> str:
    """A random ball or box over v, sometimes with a bound on one component."""
    c = rng.uniform(-1, 1, 2)
    r = float(rng.uniform(0.1, 0.8))
    op = "<" if rng.random() < 0.5 else "<="
    kind = rng.integers(3)
    if kind == 0:
        text = f"norm(v - {_vec(c)}) {op} {r:.3f}"
    elif kind == 1:
        text = f"all(abs(v - {_vec(c)}) {op} {r:.3f})"
    else:
        text = f"v[0] >= {c[0] - r:.3f} and v[0] {op} {c[0] + r:.3f} and v[1] > {c[1] - r:.3f} and v[1] < {c[1] + r:.3f}"
    return text


def _sample(pred, n: int = 4000, seed: int = 0) -> np.ndarray:
    pts = np.random.default_rng(seed).uniform(-2, 2, (60_000, 2))
    inside = pts[pred.evaluate({"v": pts})]
    return inside[:n]


def test_region_bounds_agree_with_z3_and_with_sampling_on_random_pairs():
    rng = np.random.default_rng(7)
    decided = {PROVED: 0, IMPOSSIBLE: 0}
    for k in range(60):
        s, t = _pred(_region(rng)), _pred(_region(rng))
        verdict = region_verdict(atoms_of(s), atoms_of(t))
        if verdict is None:
            continue
        decided[verdict] += 1
        # z3, asked the same question without the bounds reasoning (outside reference)
        assert _solve(s, t, premises=(), declare={"v": (2,)}, constants={}, bounds={}, timeout_ms=5000, containment=True) == verdict, (s, t)
        pts = _sample(s, seed=k)  # brute force over the stop region
        held = t.evaluate({"v": pts})
        assert held.all() if verdict == PROVED else not held.any(), (s, t)
    # the check is not vacuous: both answers occur
    assert decided[PROVED] >= 3 and decided[IMPOSSIBLE] >= 10, decided


@pytest.mark.parametrize("stop, target", [
    ("norm(v) <= 1", "norm(v) < 1"),  # the circle itself is in S, not in T
    ("x <= 2 and x >= 0", "x < 2"),
    ("all(abs(v) <= 1)", "all(abs(v) < 1)"),
    ("all(abs(v) <= 1)", "norm(v) < 1.4142135623730951"),  # the corner sits on T's boundary
])
def test_a_boundary_shared_by_both_regions_is_never_proved_inside(stop, target):
    assert region_verdict(atoms_of(_pred(stop)), atoms_of(_pred(target))) is None


@pytest.mark.parametrize("stop, target", [
    ("x <= 2 and x >= 0", "x >= 2"),  # they meet at x = 2
    ("norm(v - [1, 0]) <= 1", "norm(v + [1, 0]) <= 1"),  # they touch at the origin
])
def test_regions_that_touch_are_never_proved_apart(stop, target):
    assert region_verdict(atoms_of(_pred(stop)), atoms_of(_pred(target))) != IMPOSSIBLE


@pytest.mark.parametrize("stop, target", [
    ("norm(v) < 1", "norm(v - [1, 0]) < 1"),  # balls that overlap in a lens
    ("all(abs(v) <= 1)", "all(abs(v - [1.5, 0.5]) <= 1)"),  # boxes that share a corner patch
    ("norm(v) < 1", "v[0] > 0.5"),  # a ball cut by a half-plane
    ("v[0] >= -0.5 and v[0] <= 0.5 and v[1] >= -0.5 and v[1] <= 0.5", "norm(v - [0.5, 0.5]) < 0.5"),  # box and ball
])
def test_regions_that_overlap_are_neither_proved_inside_nor_apart(stop, target):
    s, t = _pred(stop), _pred(target)
    pts = _sample(s)  # brute force: the overlap is real, and S reaches outside T
    held = t.evaluate({"v": pts})
    assert held.any() and not held.all()
    assert region_verdict(atoms_of(s), atoms_of(t)) is None


@pytest.mark.parametrize("stop, target, expected", [
    ("norm(v) < 1", "norm(v) < 1", PROVED),
    ("norm(v) < 1", "norm(v) <= 1", PROVED),
    ("x >= 1 and x < 2", "x >= 1 and x <= 2", PROVED),
    ("all(abs(v) <= 0.01)", "norm(v) < 0.05", PROVED),
    ("norm(v - [0, 0]) < 0.2", "norm(v - [1, 0]) < 0.5", IMPOSSIBLE),
])
def test_written_the_same_way_or_clearly_apart_is_decided(stop, target, expected):
    assert region_verdict(atoms_of(_pred(stop)), atoms_of(_pred(target))) == expected


def test_a_name_the_premises_pin_is_a_constant_and_premise_boxes_bound_the_stop_region():
    bounds = {"w": (np.array([0.3, 0.0]), np.array([0.3, 0.0])), "v": (np.array([-1.0, -1.0]), np.array([1.0, 1.0]))}
    fixed = fixed_values(bounds)
    assert set(fixed) == {"w"}
    stop = with_bounds(atoms_of(_pred("norm(v - w) < 0.02"), fixed), bounds)
    assert region_verdict(stop, atoms_of(_pred("norm(v - [0.3, 0]) < 0.05"), fixed)) == PROVED
    assert region_verdict(stop, atoms_of(_pred("norm(v - [-0.3, 0]) < 0.05"), fixed)) == IMPOSSIBLE
    # without the premises nothing relates v to the constant: undecided
    assert region_verdict(atoms_of(_pred("norm(v - w) < 0.02")), atoms_of(_pred("norm(v - [0.3, 0]) < 0.05"))) is None
    # premise boxes alone refute a target outside them
    assert region_verdict(with_bounds(atoms_of(_pred("x > 0")), bounds), atoms_of(_pred("v[0] > 1.5"))) == IMPOSSIBLE


def _ask(stop: str, target: str, memo: SolverMemo, constants=None):
    return region_fact(_pred(stop), _pred(target), declare={"x": ()}, constants=constants, source="A", target_name="B", memo=memo)


def test_a_kept_z3_answer_is_reused_only_for_the_same_question():
    memo = SolverMemo()
    # x * x < 1 is opaque to the bounds reasoning: z3 decides
    first = _ask("x * x < 1", "x < 1", memo)
    assert first.status == PROVED and "z3" in first.reason and memo.asked == 1
    assert _ask("x * x < 1", "x < 1", memo).status == PROVED and memo.reused == 1
    # a changed target, a changed stop region: asked again, and the answer differs
    changed = _ask("x * x < 1", "x < 0.5", memo)
    assert changed.status == OPEN and memo.asked == 2 and memo.reused == 1
    assert _ask("x * x < 4", "x < 1", memo).status == OPEN and memo.asked == 3
    # the same text with another constant value is another question
    assert _ask("x * x < 1", "x < c", memo, {"c": np.array(1.0)}).status == PROVED
    assert _ask("x * x < 1", "x < c", memo, {"c": np.array(0.5)}).status == OPEN
    assert memo.asked == 5 and memo.reused == 1

