"""Golden outputs of the trainer on fixed seeds: rollouts, updates, results and option models.

The fingerprints in ``golden_trainer.json`` (see ``golden.py``) keep discrete data
exact and float data to a relative 1e-4 of its size, so they hold on any CPU
(kernels differ in the last bits) while a change of behaviour fails them; a
refactor must leave them equal.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from kinetome.library.controllers import build_controller, context_from_rig
from kinetome.trainers.option_critic import OptionCriticTrainer
from kinetome.trainers.retrain import retrain_skill
from kinetome.trainers.train_set import train_trainables
from kinetome.trainers.trainable import flat_skill

from .golden import check_golden, digest, module_digest, rows_digest
from .pointmass import loaded_reach, make_pointmass, quick_config, reach_skill

UPDATES = 3
BATCH = 16 * 32  # quick_config's parallel envs x segment steps


@pytest.fixture(scope="module")
def rig():
    return make_pointmass(max_episode_steps=60)


def _rollout_digests(rollout, k: int) -> dict[str, str]:
    out = {}
    for f in dataclasses.fields(rollout):
        value = getattr(rollout, f.name)
        if isinstance(value, dict):
            for name, arr in sorted(value.items()):
                out[f"rollout{k}.{f.name}.{name}"] = digest(arr)
        else:
            out[f"rollout{k}.{f.name}"] = digest(np.asarray(value))
    return out


def _run_trainer(skills, rig, cfg, *, episode_per_skill):
    trainer = OptionCriticTrainer(skills, rig, cfg, episode_per_skill=episode_per_skill)
    seen: dict[str, str] = {}
    collect = trainer.collector.collect
    count = [0]

    def recording_collect():
        rollout = collect()
        k = count[0]
        seen.update(_rollout_digests(rollout, k))
        seen[f"stats{k}"] = digest(trainer.collector.stats.summary())
        count[0] += 1
        return rollout

    trainer.collector.collect = recording_collect
    outcome = trainer.run()
    seen["rows"] = rows_digest(outcome.rows)
    for label, module in trainer._modules().items():
        seen[f"module.{label}"] = module_digest(module)
    seen["obs_norm"] = digest(outcome.obs_norm.tensors("obs"))
    seen["ret_norm"] = digest(outcome.ret_norm.tensors("ret"))
    seen["rng.numpy"] = digest(trainer.np_rng.random(4))
    seen["rng.torch"] = digest(trainer.torch_gen.get_state())
    return seen


def _mlp_skill(rig):
    ctrl = build_controller("mlp", context_from_rig(rig), settings={"inputs": ["qpos", "qvel"], "hidden": [16]},
                            exploration_std=0.5)
    return flat_skill(ctrl, max_steps=rig.max_episode_steps)


FLAT = {
    "flat_linear": dict(),
    "flat_mlp_inputs": dict(learning_rate=3e-3, learning_rate_schedule="linear", critic_clip=0.2, policy_shift_limit=0.002),
    "flat_raw": dict(standardise_observations=False, scale_rewards=False, standardise_advantages=False,
                     entropy_weight=0.01, max_episode_steps=25),
}


@pytest.mark.parametrize("name", sorted(FLAT))
def test_flat_mode_golden(rig, name):
    skill = _mlp_skill(rig) if name == "flat_mlp_inputs" else reach_skill(rig)
    cfg = quick_config(env_step_budget=BATCH * UPDATES, **FLAT[name])
    check_golden(name, _run_trainer([skill], rig, cfg, episode_per_skill=True))


@pytest.mark.parametrize("mode", ["registered", "hard", "confined", "learned"])
def test_options_mode_golden(rig, mode):
    # two reach skills with short timeouts and a short episode limit: switches, forced stops,
    # truncation bootstraps and steps where no skill's starts_when holds all occur
    skills = [reach_skill(rig, gain=3.0, max_steps=15), reach_skill(rig, gain=2.0, max_steps=15)]
    skills[1].name = "reach2"
    cfg = quick_config(env_step_budget=BATCH * UPDATES, stop_mode=mode, stop_init_logit=0.0, stop_lr=0.05,
                       deliberation_cost=0.05, max_episode_steps=40)
    check_golden(f"options_{mode}", _run_trainer(skills, rig, cfg, episode_per_skill=False))


def test_retrain_golden(rig):
    result = retrain_skill(loaded_reach(rig), rig, quick_config(env_step_budget=BATCH * 2, eval_every=1), seed=4)
    meta = {k: v for k, v in result.metadata().items() if k != "wall_time_s"}
    check_golden("retrain", {
        "parameters": digest(result.parameters_bytes),
        "normaliser": digest(result.normaliser),
        "curve": rows_digest(result.curve),
        "metadata": digest(meta),
    })


def test_train_set_golden(rig):
    skills = []
    for name, gain in (("a", 3.0), ("b", 1.0)):
        s = reach_skill(rig, gain=gain, max_steps=20)
        s.name, s.starts_when = name, None
        skills.append(s)
    cfg = quick_config(env_step_budget=BATCH * 2, stop_mode="learned", stop_init_logit=0.0, stop_lr=0.05,
                       deliberation_cost=0.02, seed=7)
    result = train_trainables(skills, rig, cfg)
    meta = {k: v for k, v in result.metadata().items() if k != "wall_time_s"}
    check_golden("train_set", {
        **{f"parameters.{k}": digest(v) for k, v in result.parameters_bytes.items()},
        "critic": digest(result.critic),
        "terminations": digest(result.terminations),
        "normaliser": digest(result.normaliser),
        "curve": rows_digest(result.curve),
        "metadata": digest(meta),
    })


def test_fitted_models_golden(rig):
    from kinetome.library.runtime.execute import run_skill
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.trainers.fitting import fit_option_models

    skill = loaded_reach(rig, gain=3.0, max_steps=30)
    starts = sample_starts(rig, None, 80, seed=5)
    rollout = run_skill(skill, rig, starts=starts, seed=5, gamma=0.97)
    models = fit_option_models(rollout, gamma=0.97, envelope=rig.layout, seed=2, fitted_at="2000-01-01T00:00:00Z")
    check_golden("fitted_models", {name: digest(data) for name, data in sorted(models.to_files().items())})
