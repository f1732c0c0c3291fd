"""Parameter-space search (CMA-ES): the optimum of a quadratic, bounds, resume bit for bit, and a real skill."""

from __future__ import annotations

import copy
import dataclasses

import numpy as np
import pytest

from kinetome.library.errors import InvalidInputError, TrainingError
from kinetome.trainers.option_critic import StopTraining
from kinetome.trainers.search import ParameterSearch, search_space

from .pointmass import loaded_reach, make_pointmass, quick_config


@pytest.fixture(scope="module")
def rig():
    return make_pointmass(max_episode_steps=60)


class QuadraticSearch(ParameterSearch):
    """The search loop on an ellipsoid f = -sum_i w_i u_i^2, u = (p - centre) / bound range, w_i from 1 to 100
    (log-spaced), 100 'env steps' per evaluation. The centre may lie outside the bounds."""

    centre: dict[str, np.ndarray] = {}
    seen: list[dict[str, np.ndarray]]

    def fitness(self, x, starts):
        self.apply(x)
        p = self.space.decode(x)
        self.seen.append(p)
        flat = np.concatenate([np.asarray(p[n]).ravel() - np.asarray(self.centre[n]).ravel() for n in self.space.names])
        u = flat / (self.space.high - self.space.low)
        value = -float(np.sum(np.logspace(0, 2, u.size) * u**2))
        return value, {"steps": 100, "success": 0.0, "length": 1.0, "return": value}


def _quadratic(rig, centre, *, budget=100 * 12 * 40, seed=0, checkpoint_dir=None, progress=None, step=0.2, finalists=1):
    skill = loaded_reach(rig)
    skill = dataclasses.replace(skill, controller=copy.deepcopy(skill.controller))
    cfg = quick_config(env_step_budget=budget, seed=seed, search_step_size=step, search_population=12,
                       checkpoint_every=1 if checkpoint_dir else 0, search_finalists=finalists, search_final_episodes=4)
    search = QuadraticSearch(skill, rig, cfg, frozen=("reference",), checkpoint_dir=checkpoint_dir, progress=progress)
    search.centre, search.seen = centre, []
    return search


def _centre(inside: bool):
    gain = np.array([[-3.0, 0.5, -1.0, 0.0], [0.0, -2.0, 0.0, -1.5]])
    if not inside:
        gain = gain.copy()
        gain[0, 0] = -80.0  # beyond the bound -50
    return {"gain": gain, "bias": np.array([0.2, -0.4])}


def test_cma_es_reaches_the_optimum_of_a_quadratic(rig):
    # Common practice for optimiser tests: a convex quadratic (an ellipsoid, condition number 100) with a
    # known optimum. 10 parameters (8 gains in [-50, 50], 2 biases in [-1, 1]); tolerance 1e-3 of each
    # bound range after 120 generations (measured: 8e-4 after 100, 1e-5 after 150).
    search = _quadratic(rig, _centre(True), budget=100 * 12 * 120)
    out = search.run()
    assert out.generations == 120 and out.steps == 100 * 12 * 120  # 12 candidates, 100 steps each
    for name, value in _centre(True).items():
        span = 100.0 if name == "gain" else 2.0
        np.testing.assert_allclose(out.parameters[name], value, atol=1e-3 * span)
    np.testing.assert_array_equal(search.skill.controller.parameter_values()["gain"], out.parameters["gain"])


def test_every_candidate_respects_the_bounds(rig):
    search = _quadratic(rig, _centre(False), budget=100 * 12 * 80, step=0.3)
    out = search.run()
    bounds = search.skill.controller.parameter_bounds()
    for p in search.seen:
        for name, value in p.items():
            low, high = bounds[name]
            assert np.all(value >= low) and np.all(value <= high)
    assert out.parameters["gain"][0, 0] == pytest.approx(-50.0, abs=0.5)  # the optimum lies beyond: the bound


def test_resume_after_a_stop_is_bit_for_bit(rig, tmp_path):
    whole = _quadratic(rig, _centre(True), budget=100 * 12 * 12).run()

    def stop_at_5(row):
        if row["update"] == 5:
            raise StopTraining

    first = _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path, progress=stop_at_5).run()
    assert not first.completed and first.generations == 5
    with pytest.raises(TrainingError, match="already holds a checkpoint"):
        _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path).run()
    second_search = _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path)
    second = second_search.run(resume=True)
    assert second.resumed_from == 5 and second.completed and len(second_search.seen) == 7 * 12  # only the rest ran
    for name in whole.parameters:
        np.testing.assert_array_equal(second.parameters[name], whole.parameters[name])
    assert [r["best_fitness"] for r in second.rows] == [r["best_fitness"] for r in whole.rows]
    with pytest.raises(TrainingError, match="resume must use the settings"):
        _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path, seed=9).run(resume=True)


def test_search_space_skips_noise_and_fixed_parameters_and_needs_bounds(rig):
    skill = loaded_reach(rig)
    space = search_space(skill.controller, frozen=("reference",))
    assert space.names == ("gain", "bias") and space.size == 10
    x = space.encode(skill.controller.parameter_values())
    for name, value in space.decode(x).items():
        np.testing.assert_allclose(value, skill.controller.parameter_values()[name], atol=1e-12)
    from kinetome.library.controllers import build_controller, context_from_rig

    mlp = build_controller("mlp", context_from_rig(rig), settings={"hidden": [4]})
    wide = search_space(mlp)  # mlp weights have finite bounds too
    assert "input_mean" not in wide.names and "log_std" not in wide.names
    with pytest.raises(InvalidInputError, match="at least one parameter"):
        search_space(skill.controller, frozen=("gain", "reference", "bias"))


def test_search_improves_a_real_skill_on_common_episodes(rig):
    # The zero-gain reach never reaches the goal; 16 generations of 8 candidates x 8 episodes find gains that do.
    skill = loaded_reach(rig, max_steps=60)
    work = dataclasses.replace(skill, controller=copy.deepcopy(skill.controller))
    cfg = quick_config(env_step_budget=60 * 8 * 8 * 16, search_population=8, search_episodes=8, search_step_size=0.1, seed=1)
    search = ParameterSearch(work, rig, cfg, frozen=("reference",))
    starts = search._episodes(0)
    before, _ = search.fitness(search.x0, starts)
    out = search.run()
    after, info = search.fitness(search.space.encode(out.parameters), starts)
    assert after > before + 5.0 and info["success"] > 0.5, (before, after, info)
    assert out.rows[-1]["env_steps"] == out.steps <= cfg.env_step_budget + 60 * 8 * 8


class MeanIsAHoleSearch(QuadraticSearch):
    """The quadratic, except that a small ball around ``hole`` (where the final mean will be) scores badly:
    a good population whose mean is not itself good, as a gait whose average parameters do not walk."""

    hole: np.ndarray | None = None

    def fitness(self, x, starts):
        value, info = super().fitness(x, starts)
        if self.hole is not None and np.linalg.norm(np.asarray(x) - self.hole) < 1e-9:
            value = -1e6
        return value, {**info, "return": value}


def test_final_choice_keeps_the_best_finalist_on_fresh_episodes_within_the_budget(rig):
    budget = 100 * 12 * 30
    plain = _quadratic(rig, _centre(True), budget=budget).run()
    assert plain.finalists == []  # search_finalists 1: the final mean, no extra episodes

    search = _quadratic(rig, _centre(True), budget=budget, finalists=4)
    out = search.run()
    assert [f["finalist"] for f in out.finalists] == ["final mean", "best seen 1", "best seen 2", "best seen 3"]
    scores = [f["score"] for f in out.finalists]
    chosen = search.space.encode(out.parameters)
    assert search.fitness(chosen, None)[0] == max(scores)
    # the reserve (4 finalists x 4 episodes x 1 step per "episode" here) keeps the total within one generation
    assert out.steps <= budget + 100 * 12 and out.steps == out.rows[-1]["env_steps"] + 4 * 100

    fresh = _quadratic(rig, _centre(True), budget=budget, finalists=4)  # a fresh skill: the same x0 and draws
    holed = MeanIsAHoleSearch(fresh.skill, rig, fresh.config, frozen=("reference",))
    holed.centre, holed.seen = _centre(True), []
    plain_mean = search.space.encode(plain.parameters)
    holed.hole = plain_mean  # the same run reaches the same final mean, which now scores -1e6
    out_holed = holed.run()
    assert out_holed.finalists[0]["score"] < -1e5
    assert not np.array_equal(holed.space.encode(out_holed.parameters), plain_mean)
    assert holed.fitness(holed.space.encode(out_holed.parameters), None)[0] == max(f["score"] for f in out_holed.finalists)


def test_resume_with_a_final_choice_is_bit_for_bit(rig, tmp_path):
    whole = _quadratic(rig, _centre(True), budget=100 * 12 * 12, finalists=3).run()

    def stop_at_5(row):
        if row["update"] == 5:
            raise StopTraining

    _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path, progress=stop_at_5, finalists=3).run()
    second = _quadratic(rig, _centre(True), budget=100 * 12 * 12, checkpoint_dir=tmp_path, finalists=3).run(resume=True)
    assert second.finalists == whole.finalists  # the best seen are rebuilt by replaying the checkpoint
    for name in whole.parameters:
        np.testing.assert_array_equal(second.parameters[name], whole.parameters[name])
