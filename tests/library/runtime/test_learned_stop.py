"""Learned stops run as trained: the stop rule per mode, the stored network, batched == reference, geometric durations."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import torch
from safetensors.numpy import save

from kinetome.library.runtime.execute import reference_run_chain, run_chain, run_skill
from kinetome.library.runtime.learned import STOP_MODES, FeatureScaler, LearnedStop, TanhNet, TrainedFeatures, stop_rule
from kinetome.library.runtime.records import EndReason
from kinetome.library.runtime.starts import sample_starts
from tests.trainers.pointmass import loaded_reach, make_pointmass

T, F = True, False


@pytest.fixture(scope="module")
def rig():
    return make_pointmass(max_episode_steps=60)


@pytest.mark.parametrize(
    "mode, forced, learnable",
    [
        # stops = [holds, holds, not, not], timeout = [no, yes, no, yes]
        ("registered", [T, T, F, T], [F, F, F, F]),
        ("hard", [T, T, F, T], [F, F, T, F]),
        ("confined", [F, T, F, T], [T, F, F, F]),
        ("learned", [F, T, F, T], [T, F, T, F]),
    ],
)
def test_stop_rule_per_mode(mode, forced, learnable):
    f, lrn = stop_rule(mode, np.array([T, T, F, F]), np.array([F, T, F, T]))
    assert f.tolist() == forced and lrn.tolist() == learnable


def test_stop_rule_refuses_unknown_modes():
    with pytest.raises(ValueError, match="stop mode must be one of"):
        stop_rule("sometimes", np.array([T]), np.array([F]))
    assert STOP_MODES == ("registered", "hard", "confined", "learned")


def test_stored_network_and_scaler_match_the_trainers_torch_versions():
    from kinetome.trainers.checkpoint import module_tensors
    from kinetome.trainers.nets import TerminationHeads
    from kinetome.trainers.normaliser import ObservationNormaliser

    torch.manual_seed(0)
    heads = TerminationHeads(4, 3, (8,), init_logit=-1.0)
    with torch.no_grad():
        for p in heads.parameters():
            p.add_(0.3 * torch.randn_like(p))
    norm = ObservationNormaliser(4)
    norm.update(np.random.default_rng(1).normal(2.0, 3.0, size=(50, 4)))
    x = np.random.default_rng(2).normal(size=(7, 4)) * 5
    net = TanhNet.from_tensors(module_tensors("heads", heads), "heads")
    scaler = FeatureScaler.from_tensors(norm.tensors("obs"))
    np.testing.assert_allclose(scaler(x), norm(x), rtol=0, atol=1e-15)
    np.testing.assert_allclose(net(scaler(x)), heads(torch.from_numpy(norm(x))).detach().numpy(), rtol=1e-12, atol=1e-13)


def _stop(mode: str, logit: float, n_features: int = 4, n_skills: int = 1, index: int = 0) -> LearnedStop:
    """A stop head with a constant probability sigmoid(logit) in every state."""
    net = TanhNet((np.zeros((n_skills, n_features)),), (np.full(n_skills, logit),))
    return LearnedStop(mode, index, net, TrainedFeatures(FeatureScaler(np.zeros(n_features), np.ones(n_features))))


def _run(rig, skill, n=24, seed=3, **kw):
    starts = sample_starts(rig, None, n, seed=seed)
    return run_skill(skill, rig, starts=starts, seed=seed, **kw).segments[0]


def test_hard_mode_with_beta_zero_runs_exactly_like_the_registered_stop(rig):
    plain = loaded_reach(rig, gain=3.0, max_steps=40)
    hard = dataclasses.replace(plain, learned_stop=_stop("hard", -60.0))
    a, b = _run(rig, plain), _run(rig, hard)
    np.testing.assert_array_equal(a.reason, b.reason)
    np.testing.assert_array_equal(a.steps, b.steps)
    assert a.count(EndReason.STOPPED) > 0


def test_learned_mode_with_beta_one_stops_after_one_step_and_beta_zero_never(rig):
    plain = loaded_reach(rig, gain=3.0, max_steps=40)
    always = _run(rig, dataclasses.replace(plain, learned_stop=_stop("learned", 60.0)))
    assert np.all(always.reason == int(EndReason.STOPPED)) and np.all(always.steps == 1)
    never = _run(rig, dataclasses.replace(plain, learned_stop=_stop("learned", -60.0)))
    assert np.all(never.reason == int(EndReason.TIMED_OUT)) and np.all(never.steps == 40)


def test_confined_mode_stops_only_inside_stops_when(rig):
    plain = loaded_reach(rig, gain=3.0, max_steps=40)
    skill = dataclasses.replace(plain, learned_stop=_stop("confined", 0.0))  # beta = 0.5 inside stops_when
    seg = _run(rig, skill, n=40)
    stopped = seg.reason == int(EndReason.STOPPED)
    assert stopped.any()
    ends = {k: v[stopped] for k, v in seg.end_state.items()}
    assert np.all(plain.stops_when.evaluate({**plain.parameters, **ends}))
    assert skill.learned_stop.within_stops_when and not _stop("hard", 0.0).within_stops_when
    # with probability 0.5 per step it runs on past the first step inside stops_when
    registered = _run(rig, plain, n=40)
    both = stopped & (registered.reason == int(EndReason.STOPPED))
    assert np.all(seg.steps[both] >= registered.steps[both]) and np.any(seg.steps[both] > registered.steps[both])


def test_constant_beta_gives_geometric_durations(rig):
    # Stopping with probability b each step gives turn lengths ~ Geometric(b), mean 1/b
    # (the constant-termination option model of Sutton, Precup & Singh 1999; from memory).
    b = 0.2
    skill = dataclasses.replace(loaded_reach(rig, gain=0.0, max_steps=200), learned_stop=_stop("learned", float(np.log(b / (1 - b)))))
    seg = _run(rig, skill, n=2000, seed=11)
    # standard error of the mean: sqrt(1 - b) / b / sqrt(2000) = 0.1; allow 4 of them (common practice)
    assert abs(seg.steps.mean() - 1 / b) < 0.4


def test_batched_run_equals_reference_loop_and_does_not_depend_on_batch_size(rig):
    skill = dataclasses.replace(loaded_reach(rig, gain=2.0, max_steps=30), learned_stop=_stop("hard", -1.5))
    starts = sample_starts(rig, None, 10, seed=4)
    batched = run_chain([skill, skill], rig, starts=starts, seed=4)
    reference = reference_run_chain([skill, skill], rig, starts=starts, seed=4)
    first = run_chain([skill, skill], rig, starts=(starts[0][:4], starts[1][:4]), seed=4)
    for a, b in zip(batched.segments, reference.segments):
        np.testing.assert_array_equal(a.reason, b.reason)
        np.testing.assert_array_equal(a.steps, b.steps)
        np.testing.assert_array_equal(a.reward, b.reward)
    for a, c in zip(batched.segments, first.segments):
        np.testing.assert_array_equal(a.steps[:4], c.steps)
    assert len(set(batched.segments[0].steps.tolist())) > 2  # stochastic stops: lengths differ


def test_learned_stop_files_round_trip_and_bad_files_are_refused():
    from kinetome.trainers.checkpoint import module_tensors
    from kinetome.trainers.nets import TerminationHeads
    from kinetome.trainers.normaliser import ObservationNormaliser, save_normalisers

    heads = TerminationHeads(4, 2, ())
    stop = LearnedStop.from_files(_stop("hard", 0.0).to_json().replace(b'"index": 0', b'"index": 1'),
                                  save(module_tensors("heads", heads)), save_normalisers(None, ObservationNormaliser(4)))
    assert stop.mode == "hard" and stop.index == 1 and stop.net.n_out == 2
    with pytest.raises(ValueError, match="schema kinetome.learned-stop/1"):
        LearnedStop.from_files(b'{"mode": "hard"}', b"", b"")
    with pytest.raises(ValueError, match="stop head index must be in"):
        _stop("hard", 0.0, index=3)
    with pytest.raises(ValueError, match="hard, confined or learned"):
        _stop("registered", 0.0)


def test_a_stop_head_trained_with_the_time_remaining_sees_the_chain_clock(rig):
    # A head that reads only the time-remaining input r (logit 2950 - 6000 r: beta ~ 0 at episode step 30,
    # ~ 1 from step 31 of the 60-step limit), counted from the start of the chain, batched and reference alike.
    net = TanhNet((np.array([[0.0, 0.0, 0.0, 0.0, -6000.0]]),), (np.array([2950.0]),))
    stop = LearnedStop("learned", 0, net, TrainedFeatures(FeatureScaler(np.zeros(4), np.ones(4)), ("time_remaining",), 60))
    first = loaded_reach(rig, gain=1.0, max_steps=20)  # times out after 20 steps
    second = dataclasses.replace(loaded_reach(rig, gain=1.0, max_steps=40), learned_stop=stop)
    starts = sample_starts(rig, None, 6, seed=1)
    out = run_chain([first, second], rig, starts=starts, seed=1)
    ref = reference_run_chain([first, second], rig, starts=starts, seed=1)
    assert np.all(out.segments[0].steps == 20)
    np.testing.assert_array_equal(out.segments[1].steps, 11)  # stops at episode step 31, the first past 30
    np.testing.assert_array_equal(ref.segments[1].steps, out.segments[1].steps)
