"""A stored skill as the search scores it: simulated once per distinct set of start states when it has no
valid option models, never simulated when it has them (starts outside their support count as failures)."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np

from kinetome.library.api import open_store, register
from kinetome.library.planning.library_problem import _start_particles
from kinetome.library.planning.skill_steps import LibrarySkill
from kinetome.library.runtime.skill import load_skill
from kinetome.library.tasks import load_start_file, task_rig

ROOT = Path(__file__).resolve().parents[3]


def _skill(tmp_path, **kw) -> tuple[LibrarySkill, dict]:
    store = open_store(tmp_path / "store")
    register(ROOT / "configs" / "skills" / "arm-lift.yaml", store=store)
    rig = task_rig("kinetome/BenchArm-v0")
    states = _start_particles(rig, load_start_file(ROOT / "configs" / "initial_states" / "arm_home.yaml"), 8, 0)
    return LibrarySkill(load_skill(store, "arm-lift", rig=rig), rig, **kw), states


def test_a_skill_without_models_is_simulated_once_per_set_of_start_states(tmp_path):
    skill, states = _skill(tmp_path)
    first = skill.step(states, np.random.default_rng(0))
    ran = skill.simulated_steps
    assert ran > 0 and first.p_stop.sum() > 0 and first.scored_by.startswith("simulation")
    again = skill.step({k: v.copy() for k, v in states.items()}, np.random.default_rng(1))
    assert skill.simulated_steps == ran and again is first  # the same states: kept, not run again
    moved = {k: v.copy() for k, v in states.items()}
    moved["qpos"][0, 0] += 1e-3
    moved_result = skill.step(moved, np.random.default_rng(0))
    assert skill.simulated_steps > ran and moved_result is not first  # one state differs: run again


class _NoSupport:
    """Option models whose support contains none of the starts (the search must not fall back to MuJoCo)."""

    features = ("qpos", "qvel")

    @staticmethod
    def inside(states):
        return np.zeros(len(states["qpos"]), dtype=bool)


def test_starts_outside_the_models_support_count_as_failures_and_are_never_simulated(tmp_path):
    models = SimpleNamespace(models=SimpleNamespace(support=_NoSupport(), features=_NoSupport.features, duration=None, end_state=None),
                             artifact="arm-lift@1/option-models#1")
    skill, states = _skill(tmp_path, models=models, _error=0.0)
    res = skill.step(states, np.random.default_rng(0))
    assert skill.simulated_steps == 0
    assert res.unknown.all() and not res.p_stop.any()
    assert "100% of its starts outside their support count as failures" in res.scored_by


def test_starts_inside_the_models_support_are_answered_by_the_models_alone(tmp_path):
    asked = []

    class _HalfSupport:
        @staticmethod
        def inside(states):
            return np.arange(len(states["qpos"])) % 2 == 0

    class _Duration:
        @staticmethod
        def predict(states):
            n = len(states["qpos"])
            asked.append(n)
            return {"p_stopped": np.full(n, 0.75), "duration": np.full(n, 12.0), "stop_discount": np.full(n, 0.9)}

    models = SimpleNamespace(models=SimpleNamespace(support=_HalfSupport(), features=("qpos", "qvel"), duration=_Duration(), end_state=None),
                             artifact="arm-lift@1/option-models#1")
    skill, states = _skill(tmp_path, models=models, _error=0.0)
    inside = _HalfSupport.inside(states)
    res = skill.step(states, np.random.default_rng(0))
    assert skill.simulated_steps == 0 and asked == [int(inside.sum())]  # the models see only the starts they support
    assert np.all(res.p_stop[inside] == 0.75) and np.all(res.duration[inside] == 12.0) and not res.p_stop[~inside].any()
    assert res.scored_by.startswith("option models") and f"{100 * np.mean(~inside):.0f}% of its starts outside" in res.scored_by
