"""Checkpoints: atomic files, resume after an injected stop or SIGKILL equals an uninterrupted run bit for bit."""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import torch

from kinetome.library.errors import TrainingError
from kinetome.trainers.checkpoint import load_checkpoint, save_checkpoint
from kinetome.trainers.option_critic import OptionCriticTrainer, StopTraining

from .pointmass import make_pointmass, quick_config, reach_skill

UPDATES = 6
_TIMING = ("steps_per_s",)


def _trainer(rig, ckpt=None, progress=None, **over):
    skill = reach_skill(rig)
    over.setdefault("env_step_budget", 16 * 32 * UPDATES)
    cfg = quick_config(checkpoint_every=1, **over)
    return skill, OptionCriticTrainer([skill], rig, cfg, episode_per_skill=True, checkpoint_dir=ckpt, progress=progress)


def _same(rows_a, rows_b):
    assert len(rows_a) == len(rows_b)
    for a, b in zip(rows_a, rows_b):
        ka = {k: v for k, v in a.items() if k not in _TIMING}
        kb = {k: v for k, v in b.items() if k not in _TIMING}
        assert json.dumps(ka, sort_keys=True) == json.dumps(kb, sort_keys=True)


def _assert_identical(skill_a, trainer_a, skill_b, trainer_b):
    va, vb = skill_a.controller.parameter_values(), skill_b.controller.parameter_values()
    for name in va:
        np.testing.assert_array_equal(va[name], vb[name])
    for pa, pb in zip(trainer_a.critic.parameters(), trainer_b.critic.parameters()):
        assert torch.equal(pa, pb)
    np.testing.assert_array_equal(trainer_a.obs_norm.moments.mean, trainer_b.obs_norm.moments.mean)
    _same(trainer_a.rows, trainer_b.rows)


@pytest.fixture(scope="module")
def rig():
    return make_pointmass()


@pytest.fixture(scope="module")
def uninterrupted(rig):
    skill, trainer = _trainer(rig)
    trainer.run()
    return skill, trainer


def test_resume_after_an_injected_stop_is_bit_for_bit(rig, uninterrupted, tmp_path):
    def stop_after_three(row):
        if row["update"] == 3:
            raise StopTraining

    _, first = _trainer(rig, tmp_path, progress=stop_after_three)
    outcome = first.run()
    assert outcome.updates == 3 and not outcome.completed
    skill, second = _trainer(rig, tmp_path)
    outcome = second.run(resume=True)
    assert outcome.resumed_from == 3 and outcome.updates == UPDATES and outcome.completed
    _assert_identical(*uninterrupted, skill, second)


_CHILD = """
import sys, time
sys.path.insert(0, {root!r})
from tests.trainers.test_checkpoint import _trainer
from tests.trainers.pointmass import make_pointmass

def slow(row):
    print("update", row["update"], flush=True)
    time.sleep(0.2)

_, trainer = _trainer(make_pointmass(), {ckpt!r}, progress=slow)
trainer.run()
"""


def test_resume_after_sigkill_is_bit_for_bit(rig, uninterrupted, tmp_path):
    root = str(Path(__file__).resolve().parents[2])
    ckpt = str(tmp_path / "ckpt")
    child = subprocess.Popen([sys.executable, "-c", _CHILD.format(root=root, ckpt=ckpt)], stdout=subprocess.PIPE, text=True, cwd=root)
    try:
        for line in child.stdout:
            if line.strip() == "update 2":
                break
        os.kill(child.pid, signal.SIGKILL)
    finally:
        child.wait(timeout=60)
    assert child.returncode == -signal.SIGKILL
    tensors, meta = load_checkpoint(ckpt)
    assert 2 <= meta["update"] < UPDATES
    skill, resumed = _trainer(rig, ckpt)
    outcome = resumed.run(resume=True)
    assert outcome.completed and outcome.resumed_from == meta["update"]
    _assert_identical(*uninterrupted, skill, resumed)


def test_a_completed_run_resumes_to_itself(rig, tmp_path):
    skill_a, a = _trainer(rig, tmp_path, env_step_budget=16 * 32 * 2)
    a.run()
    skill_b, b = _trainer(rig, tmp_path, env_step_budget=16 * 32 * 2)
    assert b.run(resume=True).updates == 2
    _assert_identical(skill_a, a, skill_b, b)


def test_existing_checkpoint_needs_resume_and_the_same_settings(rig, tmp_path):
    _, a = _trainer(rig, tmp_path, env_step_budget=16 * 32 * 1)
    a.run()
    _, b = _trainer(rig, tmp_path, env_step_budget=16 * 32 * 1)
    with pytest.raises(TrainingError, match="already holds a checkpoint; pass resume=True"):
        b.run()
    _, c = _trainer(rig, tmp_path, env_step_budget=16 * 32 * 1, learning_rate=0.5)
    with pytest.raises(TrainingError, match=r"resume must use the settings .* \(learning_rate: 0.02 -> 0.5\)"):
        c.run(resume=True)


def test_checkpoint_files_are_checked(tmp_path):
    assert load_checkpoint(tmp_path) is None
    path = save_checkpoint(tmp_path, update=1, tensors={"x": np.arange(3.0)}, meta={"a": 1})
    tensors, meta = load_checkpoint(tmp_path)
    np.testing.assert_array_equal(tensors["x"], np.arange(3.0))
    assert meta == {"a": 1}
    save_checkpoint(tmp_path, update=2, tensors={"x": np.arange(4.0)}, meta={"a": 2})
    assert not path.exists()  # the older state file is removed once the pointer moved on
    newest = tmp_path / "state-0000002.safetensors"
    newest.write_bytes(newest.read_bytes()[:-1] + b"\x00")
    with pytest.raises(TrainingError, match="must have sha256 .* the file is damaged"):
        load_checkpoint(tmp_path)
    newest.unlink()
    with pytest.raises(TrainingError, match="is missing"):
        load_checkpoint(tmp_path)
    (tmp_path / "checkpoint.json").write_text("{not json")
    with pytest.raises(TrainingError, match="must be JSON"):
        load_checkpoint(tmp_path)
    (tmp_path / "checkpoint.json").write_text(json.dumps({"format": "other"}))
    with pytest.raises(TrainingError, match="must have format"):
        load_checkpoint(tmp_path)
