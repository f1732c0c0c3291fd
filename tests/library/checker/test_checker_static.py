"""Static method at handoff level: proofs against brute-force sampling, envelope, limits, relaxation, confirmation.

Outside reference: brute force with power. For every pair the solver proves, no
sampled state satisfies A's stop region and the envelope but not B's initiation
set. Samples are drawn *inside* A's stop region (in the relaxed space the proof
covers) by hit-and-run with the shrinkage step of slice sampling (Neal, "Slice
sampling", Ann. Statist. 2003), started from a solver model of the region: every
tested pair gets at least 1,000 samples inside it (asserted), however small the
region is. Physical states computed by MuJoCo are checked as well.
"""

from __future__ import annotations

import numpy as np
import pytest
from checker_testkit import ARM, WALKER, CONFIGS, Limits, stub_context, stub_skill

from kinetome.envs import make_rig
from kinetome.library.checker import Handoff, Verdict
from kinetome.library.checker.envelope import physical_envelope
from kinetome.library.checker.static_method import start_box, static_method


@pytest.fixture(scope="module")
def arm():
    return make_rig(ARM)


@pytest.fixture(scope="module")
def walker():
    return make_rig(WALKER)


def _static(rig, a, b, **kw):
    ctx = stub_context(rig, [a, b], **kw)
    return static_method(ctx, [Handoff(1, a.ref, b.ref)])[1]


def _vector_layout(rig):
    """(name, flat size) of the free quantities; quantities aliasing a qpos/qvel entry follow them."""
    aliases = {n for n, src in rig.sources.items() if src.field in ("qpos", "qvel") and n not in ("qpos", "qvel") and not rig.layout[n].derived}
    return [(q.name, q.size) for q in rig.layout if q.name not in aliases]


def _values(rig, parts, x):
    out, k = {}, 0
    for name, size in parts:
        out[name] = x[:, k : k + size].reshape((x.shape[0], *rig.layout[name].shape))
        k += size
    for name, src in rig.sources.items():
        if src.field in ("qpos", "qvel") and name not in out and src.field in out:
            out[name] = out[src.field][:, list(src.index)].reshape((x.shape[0], *rig.layout[name].shape))
    return out


def _box(parts, envelope):
    lo = np.concatenate([np.where(np.isfinite(envelope.bounds[n][0]), envelope.bounds[n][0], -5.0) for n, _ in parts])
    hi = np.concatenate([np.where(np.isfinite(envelope.bounds[n][1]), envelope.bounds[n][1], 5.0) for n, _ in parts])
    return lo, hi


def _start_point(rig, a, envelope, parts, rng):
    """A state in A's stop region and the envelope, from z3 (asked to refute an impossible conclusion)."""
    from kinetome.library.predicates import parse_predicate
    from kinetome.library.predicates.smt import SmtContext, check_implication

    lo, hi = _box(parts, envelope)
    shapes = rig.layout.shapes()
    never = parse_predicate("qpos[0] < qpos[0]", shapes)
    bounds = {}
    k = 0
    for name, size in parts:
        bounds[name] = (lo[k : k + size], hi[k : k + size])
        k += size
    ctx = SmtContext({n: shapes[n] for n, _ in parts}, constants={k: np.asarray(v) for k, v in a.parameters.items()})
    res = check_implication([a.stops_when, *envelope.premises], never, ctx, bounds=bounds, timeout_ms=20_000)
    assert res.status == "counterexample", res
    x = rng.uniform(lo, hi)
    k = 0
    for name, size in parts:
        x[k : k + size] = np.asarray(res.model[name], dtype=np.float64).reshape(-1)
        k += size
    return x


def _inside_samples(rig, a, envelope, n, rng, *, chains=40, burn=10):
    """At least ``n`` states inside A's stop region and the envelope: hit-and-run with shrinkage, ``chains``
    at once, in coordinates scaled by the box (uniform there is uniform here: the map is affine)."""
    parts = _vector_layout(rig)
    lo, hi = _box(parts, envelope)

    def inside(x):
        v = _values(rig, parts, x)
        return a.stops_when.evaluate({**v, **a.parameters}) & envelope.contains(v)

    x = np.tile(_start_point(rig, a, envelope, parts, rng), (chains, 1))
    assert np.all(inside(x))
    kept = []
    width = hi - lo  # directions in box-scaled coordinates: thin and fixed components do not block the line
    for step in range(burn + -(-n // chains)):
        d = rng.standard_normal(x.shape) * width
        d /= np.linalg.norm(d, axis=1, keepdims=True)
        with np.errstate(divide="ignore", invalid="ignore"):
            t1, t2 = (lo - x) / d, (hi - x) / d
        tmin = np.max(np.where(d != 0, np.minimum(t1, t2), -np.inf), axis=1)
        tmax = np.min(np.where(d != 0, np.maximum(t1, t2), np.inf), axis=1)
        todo = np.ones(chains, dtype=bool)
        while np.any(todo):
            t = rng.uniform(tmin, tmax)
            y = x + t[:, None] * d
            ok = todo & inside(y)
            x[ok] = y[ok]
            todo &= ~ok
            tmin = np.where(todo & (t < 0), t, tmin)
            tmax = np.where(todo & (t >= 0), t, tmax)
        if step >= burn:
            kept.append(x.copy())
    samples = np.concatenate(kept)
    return _values(rig, parts, samples), samples.shape[0]


def _physical_samples(rig, envelope, n, rng):
    """Uniform raw states inside the envelope, named state computed by MuJoCo."""
    from kinetome.library.runtime.starts import named_state_of_states

    lq, hq = (np.where(np.isfinite(x), x, s) for x, s in zip(envelope.bounds["qpos"], (-2.0, 2.0)))
    lv, hv = (np.where(np.isfinite(x), x, s) for x, s in zip(envelope.bounds["qvel"], (-5.0, 5.0)))
    qpos = rng.uniform(lq, hq, size=(n, rig.model.nq))
    qvel = rng.uniform(lv, hv, size=(n, rig.model.nv))
    return named_state_of_states(rig, qpos, qvel)


def _violations(a, b, values, envelope):
    inside = envelope.contains(values)
    in_a = a.stops_when.evaluate({**values, **a.parameters})
    in_b = b.starts_when.evaluate({**values, **b.parameters})
    return int(np.sum(inside & in_a & ~in_b))


PROVED, GAP, OPEN = "proved", "counterexample", "candidate"

PAIRS = [
    # (label, A stops_when, A params, A limits, B starts_when, B params, expected containment)
    ("joint speeds bound the speed norm", "all(abs(qvel) <= 0.2)", {}, None, "norm(qvel) < 0.5", {}, PROVED),
    ("a raw gap is a confirmed break", "qpos[0] > 0.5", {}, None, "qpos[0] > 0.6", {}, GAP),
    ("joint limit closes the gap", "qpos[0] > 0.0", {}, None, "qpos[0] < 3.0", {}, PROVED),
    ("inside the joint range it does not", "qpos[0] > 0.0", {}, None, "qpos[0] < 2.5", {}, GAP),
    ("declared joint_speed proves it", "norm(fingertip - target) < 0.02", {}, Limits(joint_speed=10.0), "abs(qvel[0]) <= 10.0", {}, PROVED),
    ("without the limit it is open", "norm(fingertip - target) < 0.02", {}, None, "abs(qvel[0]) <= 10.0", {}, OPEN),
    ("declared end_effector_speed proves it", "qpos[0] > 0.0", {}, Limits(end_effector_speed=2.0), "norm(fingertip_vel) <= 2.0", {}, PROVED),
    ("relaxed fingertip still proves", "norm(fingertip - [0.3, 0.0, 0.55]) < 0.02", {}, None, "fingertip[0] > 0.25 and fingertip[2] < 0.6", {}, PROVED),
    ("parameters are constants per skill", "norm(qpos - goal) < 0.01", {"goal": [0.1, 0.2, 0.3]}, None, "norm(qpos - goal) < 0.05", {"goal": [0.1, 0.2, 0.32]}, PROVED),
    ("same parameter name, far apart", "norm(qpos - goal) < 0.01", {"goal": [0.1, 0.2, 0.3]}, None, "norm(qpos - goal) < 0.05", {"goal": [0.1, 0.2, 0.5]}, GAP),
    ("or in the stop region", "qpos[1] > 1.0 or qpos[1] < -1.0", {}, None, "abs(qpos[1]) > 0.9", {}, PROVED),
    ("not in the initiation set", "qvel[2] > 0.3", {}, None, "not (qvel[2] < 0.1)", {}, PROVED),
]


@pytest.mark.parametrize("label, a_stop, a_par, a_lim, b_start, b_par, expected", PAIRS, ids=[p[0] for p in PAIRS])
def test_static_verdicts_and_brute_force(arm, label, a_stop, a_par, a_lim, b_start, b_par, expected):
    a = stub_skill(arm, "a@1", stops_when=a_stop, parameters=a_par, limits=a_lim)
    b = stub_skill(arm, "b@1", starts_when=b_start, parameters=b_par)
    ev = _static(arm, a, b)
    assert ev.verdict is Verdict.UNSURE  # containment alone never decides a handoff
    assert ev.details["containment"] == expected, ev.reason
    envelope = physical_envelope(arm, a_lim, owner=a.ref)
    rng = np.random.default_rng(7)
    if expected == PROVED:
        inside, count = _inside_samples(arm, a, envelope, 1000, rng)
        assert count >= 1000 and np.all(a.stops_when.evaluate({**inside, **a.parameters}))
        assert _violations(a, b, inside, envelope) == 0
        assert _violations(a, b, _physical_samples(arm, envelope, 2_000, rng), envelope) == 0
    if expected == GAP:
        # The sampler has the power to see it: states inside A's stop region that B refuses.
        inside, count = _inside_samples(arm, a, envelope, 1000, rng)
        assert count >= 1000 and _violations(a, b, inside, envelope) > 0
        assert ev.counterexamples and all(c.confirmed for c in ev.counterexamples)
        for c in ev.counterexamples:
            state = {k: np.asarray(v, dtype=np.float64)[None] for k, v in c.state.items()}
            assert bool(a.stops_when.evaluate({**state, **a.parameters})[0])
            assert not bool(b.starts_when.evaluate({**state, **b.parameters})[0])
            assert bool(envelope.contains(state)[0])
            assert c.violations  # each names the clause and the margin


def test_random_pairs_never_prove_a_sampled_violation(arm):
    """Seeded random thresholds: every proof survives 20,000 relaxed and 1,000 physical samples;
    every pair with a sampled violation is not proved (the contrapositive, checked the same way)."""
    rng, sampler = np.random.default_rng(2024), np.random.default_rng(7)
    envelope = physical_envelope(arm, None)
    proved = refuted = 0
    for trial in range(14):
        i, j = rng.integers(0, 3, size=2)
        speed, angle = rng.uniform(0.05, 1.0), rng.uniform(-0.8, 0.8)
        a_stop = f"abs(qvel[{i}]) <= {speed:.3f} and qpos[{j}] > {angle:.3f}"
        b_start = f"norm(qvel) < {rng.uniform(0.3, 2.5):.3f} and qpos[{j}] > {rng.uniform(-0.9, 0.7):.3f}"
        if trial % 2:  # B's bounds near A's, looser or tighter at random: about half are provable
            b_start = f"abs(qvel[{i}]) < {speed + rng.uniform(-0.1, 0.3):.3f} and qpos[{j}] >= {angle + rng.uniform(-0.3, 0.1):.3f}"
        a = stub_skill(arm, "a@1", stops_when=a_stop)
        b = stub_skill(arm, "b@1", starts_when=b_start)
        ev = _static(arm, a, b, max_counterexamples=1)
        inside, count = _inside_samples(arm, a, envelope, 1000, sampler)
        assert count >= 1000
        sampled = _violations(a, b, inside, envelope)
        if ev.details["containment"] == PROVED:
            proved += 1
            assert sampled == 0, (a_stop, b_start)
            assert _violations(a, b, _physical_samples(arm, envelope, 1_000, sampler), envelope) == 0
        if sampled > 0:
            refuted += 1
            assert ev.details["containment"] != PROVED
    assert proved >= 3 and refuted >= 3, (proved, refuted)  # the table exercises both sides


def test_relaxed_candidate_is_not_a_confirmed_break(arm):
    """At qpos = 0 the fingertip is at z = 0.40 m (MuJoCo), so B holds physically; the relaxed solver
    cannot see that: it must report an unconfirmed candidate, never 'breaks'."""
    a = stub_skill(arm, "a@1", stops_when="abs(qpos[0]) < 0.001 and abs(qpos[1]) < 0.001 and abs(qpos[2]) < 0.001")
    b = stub_skill(arm, "b@1", starts_when="fingertip[2] > 0.35")
    ev = _static(arm, a, b)
    assert ev.details["containment"] == OPEN
    assert ev.candidates and not ev.counterexamples
    assert all(not c.confirmed for c in ev.candidates)
    assert "fingertip" in ev.details["relaxed"]


def test_alias_of_raw_entries_is_used(walker):
    """torso_pitch reads qpos[2]: the proof needs the equality the envelope adds."""
    a = stub_skill(walker, "a@1", stops_when="qpos[2] > 0.1 and qpos[2] < 0.2")
    b = stub_skill(walker, "b@1", starts_when="torso_pitch > 0.05 and abs(torso_vel[0] - qvel[0]) < 1e-9")
    assert _static(walker, a, b).details["containment"] == PROVED


def test_terminal_states_do_not_confirm(walker):
    """A walker state with the torso pitched past 0.8 rad ends the episode: it is no stop state."""
    a = stub_skill(walker, "a@1", stops_when="qpos[0] > 1.0")
    b = stub_skill(walker, "b@1", starts_when="abs(torso_pitch) < 0.9")
    ev = _static(walker, a, b)
    assert ev.details["containment"] == OPEN  # every violating pitch (>= 0.9) is terminal: candidates only
    assert ev.candidates and not ev.counterexamples


def test_timeouts_are_outside_containment(arm):
    a = stub_skill(arm, "a@1", stops_when="all(abs(qvel) <= 0.2)")
    b = stub_skill(arm, "b@1", starts_when="norm(qvel) < 0.5")
    ev = _static(arm, a, b)
    assert ev.details["containment"] == PROVED and not ev.decided  # liveness is not part of the proof
    assert "can time out" in ev.details["timeouts"]


def test_start_box_contains_every_sampled_start(arm):
    from kinetome.envs.starts import load_start
    from kinetome.library.runtime.starts import sample_starts

    start = load_start(CONFIGS / "initial_states" / "arm_home.yaml")
    box = start_box(start, arm)
    qpos, qvel = sample_starts(arm, start, 2000, seed=3)
    low, high = box["qpos"]
    assert np.all(qpos >= low) and np.all(qpos <= high)
    assert np.allclose(box["qvel"][0], 0) and np.allclose(box["qvel"][1], 0)
    # Half-width 0.02 rad around the home keyframe (the file says so).
    assert np.allclose(high - low, 0.04)


def test_gaussian_start_is_not_a_box(arm):
    from kinetome.envs.starts import load_start

    assert start_box(load_start(CONFIGS / "initial_states" / "arm_home_wide.yaml"), arm) is None
    assert start_box(None, arm) is None


def test_entry_is_proved_over_the_start_box(arm):
    from kinetome.envs.starts import load_start

    start = load_start(CONFIGS / "initial_states" / "arm_home.yaml")
    b = stub_skill(arm, "b@1", starts_when="norm(qvel) < 0.5 and qpos[0] > 0.04")
    ctx = stub_context(arm, [b], start=start)
    ev = static_method(ctx, [Handoff(0, "initial states", b.ref)])[0]
    assert ev.verdict is Verdict.COMPOSES
    # A box partly outside B: listed start states, verdict left to sampling.
    b2 = stub_skill(arm, "b@1", starts_when="qpos[0] > 0.07")
    ev2 = static_method(stub_context(arm, [b2], start=start), [Handoff(0, "initial states", b2.ref)])[0]
    assert ev2.verdict is Verdict.UNSURE and ev2.counterexamples and ev2.counterexamples[0].confirmed
