"""In-process execution and the fallback without Ray (no Ray started here)."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.execution import InProcessExecutor, executor_for, plan_blocks
from kinetome.library.execution import executors as executors_module
from kinetome.library.execution.chain_blocks import run_chain_blocks
from kinetome.library.execution.worker import function_path
from kinetome.library.runtime.disturbances import Disturbances
from kinetome.library.runtime.execute import run_chain
from kinetome.library.runtime.records import ChainRollout

from chain_fixture import SEED, arm_chain, arm_job, arm_starts, assert_same_rollout


def test_one_worker_or_none_runs_in_this_process() -> None:
    assert isinstance(executor_for(), InProcessExecutor)
    assert isinstance(executor_for(1), InProcessExecutor)


def test_blocks_in_process_equal_one_batch_of_all_episodes() -> None:
    rig, skills = arm_chain()
    qpos, qvel = arm_starts(rig, 30)
    whole = run_chain(skills, rig, starts=(qpos, qvel), seed=SEED, explore=True, disturbances=Disturbances(sensor_noise=0.01))
    blocks = plan_blocks(30, 8)
    parts = list(run_chain_blocks(InProcessExecutor(), arm_job(rig, skills), blocks, lambda b: (qpos[b.first : b.stop], qvel[b.first : b.stop])))
    assert_same_rollout(ChainRollout.concatenate(parts), whole)
    # and the test can fail: another seed gives other episodes
    other = run_chain(skills, rig, starts=(qpos, qvel), seed=SEED + 1, explore=True, disturbances=Disturbances(sensor_noise=0.01))
    with pytest.raises(AssertionError):
        assert_same_rollout(ChainRollout.concatenate(parts), other)


def test_without_ray_workers_fall_back_to_this_process_and_say_so_once(monkeypatch, capsys) -> None:
    monkeypatch.setitem(sys.modules, "ray", None)  # import ray now raises ImportError, as when it is not installed
    monkeypatch.setattr(executors_module, "_NOTICES", set())
    first = executor_for(3)
    second = executor_for(3)
    assert isinstance(first, InProcessExecutor) and isinstance(second, InProcessExecutor)
    assert first.where == "in this process (Ray is not installed)"
    err = capsys.readouterr().err
    assert err.count("kinetome: note: Ray is not installed") == 1
    assert "pip install -e '.[cluster]'" in err


def test_without_ray_an_address_is_refused(monkeypatch) -> None:
    monkeypatch.setitem(sys.modules, "ray", None)
    with pytest.raises(InvalidInputError, match=r"--address 127.0.0.1:6379 needs Ray, which is not installed"):
        executor_for(2, "127.0.0.1:6379")


@pytest.mark.parametrize("workers,address,message", [
    (0, None, "--workers must be a whole number >= 1, got 0"),
    (True, None, "--workers must be a whole number >= 1, got True"),
    (2, "  ", "--address must be a Ray cluster address"),
])
def test_bad_worker_arguments_are_refused(workers, address, message) -> None:
    with pytest.raises(InvalidInputError, match=message.replace("(", r"\(")):
        executor_for(workers, address)


def test_only_module_level_kinetome_functions_are_sent() -> None:
    assert function_path(run_chain) == "kinetome.library.runtime.execute:run_chain"
    with pytest.raises(ValueError, match="module-level function of kinetome"):
        function_path(lambda item: item)
    with pytest.raises(ValueError, match="module-level function of kinetome, got numpy"):
        function_path(np.negative)
    with pytest.raises(ValueError, match="module-level function of kinetome"):
        InProcessExecutor().map(len, [[1]])
