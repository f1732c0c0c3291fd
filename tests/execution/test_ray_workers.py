"""Blocks on real Ray worker processes: same bits for 1, 2 and 3 workers, a killed worker's block
run again with the same result, one thread per worker, mismatched versions refused.

One local Ray (3 CPUs, no dashboard, conftest.py) serves the module.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from pathlib import Path

import numpy as np
import pytest

ray = pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")

from kinetome.library.errors import InvalidInputError  # noqa: E402
from kinetome.library.execution import InProcessExecutor, VersionMismatchError, plan_blocks  # noqa: E402
from kinetome.library.execution.chain_blocks import run_chain_blocks  # noqa: E402
from kinetome.library.execution.ray_executor import RayExecutor  # noqa: E402
from kinetome.library.execution.versions import TEST_OVERRIDE_ENV  # noqa: E402
from kinetome.library.runtime.records import ChainRollout  # noqa: E402

from chain_fixture import arm_chain, arm_job, arm_starts, assert_same_rollout  # noqa: E402

EPISODES, BLOCK = 48, 8


@pytest.fixture(scope="module")
def arm():
    rig, skills = arm_chain()
    return rig, skills, arm_job(rig, skills), arm_starts(rig, EPISODES)


def _run(executor, arm, blocks) -> ChainRollout:
    rig, skills, job, (qpos, qvel) = arm
    parts = run_chain_blocks(executor, job, blocks, lambda b: (qpos[b.first : b.stop], qvel[b.first : b.stop]))
    return ChainRollout.concatenate(list(parts))


def test_results_equal_for_one_two_and_three_ray_workers(local_ray, arm) -> None:
    blocks = plan_blocks(EPISODES, BLOCK)
    reference = _run(InProcessExecutor(), arm, blocks)
    pids = set()
    for workers in (1, 2, 3):
        executor = RayExecutor(workers=workers, address=None)
        assert executor.workers == workers
        assert_same_rollout(_run(executor, arm, blocks), reference)
        pids |= {r["pid"] for r in executor.reports.values()}
    assert os.getpid() not in pids  # real worker processes, not this one


def test_workers_run_one_thread_each_with_this_process_versions(local_ray) -> None:
    from kinetome.library.execution.versions import software_report

    (report,) = local_ray.reports.values()
    assert report["torch_threads"] == 1
    assert report["thread_env"]["OMP_NUM_THREADS"] == "1" and report["thread_env"]["OPENBLAS_NUM_THREADS"] == "1"
    mine = software_report()
    assert {k: report[k] for k in ("mujoco", "gymnasium", "numpy", "torch", "kinetome")} == {
        k: mine[k] for k in ("mujoco", "gymnasium", "numpy", "torch", "kinetome")}


def _running_block_pids() -> list[int]:
    """Descendants of this process whose title says they are running a block (Ray names a busy worker after its task)."""
    me, found = os.getpid(), []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            title = (entry / "cmdline").read_bytes().split(b"\0")[0].decode(errors="replace")
            pid = int(entry.name)
        except OSError:
            continue
        if title.startswith("ray::run_item") and _descends_from(pid, me):
            found.append(pid)
    return found


def _descends_from(pid: int, ancestor: int) -> bool:
    while pid > 1:
        if pid == ancestor:
            return True
        try:
            stat = Path(f"/proc/{pid}/stat").read_text()
        except OSError:
            return False
        pid = int(stat.rsplit(")", 1)[1].split()[1])
    return False


def test_a_worker_killed_mid_block_is_run_again_with_the_same_result(local_ray, arm) -> None:
    rig, skills, job, _ = arm
    episodes = 400  # one long block (a few seconds), so the kill lands mid-block
    qpos, qvel = arm_starts(rig, episodes)
    data = (rig, skills, job, (qpos, qvel))
    blocks = plan_blocks(episodes, episodes)
    reference = _run(InProcessExecutor(), data, blocks)
    killed: list[int] = []

    def kill_first_running_worker() -> None:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not killed:
            pids = _running_block_pids()
            if pids:
                time.sleep(0.3)  # well inside the block
                os.kill(pids[0], signal.SIGKILL)
                killed.append(pids[0])
            time.sleep(0.05)

    killer = threading.Thread(target=kill_first_running_worker)
    killer.start()
    result = _run(RayExecutor(workers=1, address=None), data, blocks)
    killer.join()
    assert killed, "no worker was seen running the block"
    assert not Path(f"/proc/{killed[0]}").exists() or "zombie" in Path(f"/proc/{killed[0]}/status").read_text()
    assert_same_rollout(result, reference)


def test_workers_with_other_versions_are_refused_naming_node_and_versions(local_ray) -> None:
    fake = {"numpy": "0.0.1", "mujoco": "9.9"}
    with pytest.raises(VersionMismatchError) as caught:
        RayExecutor(workers=1, address=None, worker_env={TEST_OVERRIDE_ENV: json.dumps(fake)})
    text = str(caught.value)
    (node,) = [n for n in ray.nodes() if n["Alive"]]
    assert f"node {node['NodeManagerAddress']} ({node['NodeManagerHostname']}, id {node['NodeID'][:12]})" in text
    assert "numpy 0.0.1 on the worker, " + np.__version__ + " here" in text
    assert "mujoco 9.9 on the worker" in text
    assert "torch" not in text  # only what differs is named


def test_an_error_in_a_worker_comes_back_as_the_same_error(local_ray, arm) -> None:
    rig, skills, job, (qpos, qvel) = arm
    bad = {**job, "env": "kinetome/NoSuchRobot-v0"}
    with pytest.raises(InvalidInputError, match="NoSuchRobot"):
        list(run_chain_blocks(RayExecutor(workers=2, address=None), bad, plan_blocks(16, 8), lambda b: (qpos[: b.count], qvel[: b.count])))
