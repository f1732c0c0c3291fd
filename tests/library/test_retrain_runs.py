"""Retrain output folders: one per run, never colliding; --resume finds the interrupted run and says which."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.retrain_runs import RetrainRun, explicit_run, find_run_to_resume, mark_finished, new_run
from kinetome.trainers.checkpoint import POINTER

ROOT = Path(__file__).resolve().parents[2]
VARIANT = ROOT / "configs" / "variants" / "heavy_payload.yaml"


def _fake_checkpoint(run: RetrainRun) -> None:
    run.checkpoint_dir.mkdir(parents=True, exist_ok=True)
    (run.checkpoint_dir / POINTER).write_text("{}")


def test_each_new_run_gets_its_own_folder(tmp_path: Path) -> None:
    runs = [new_run("arm-lift@1", VARIANT, store_root=tmp_path / "s", seed=0, root=tmp_path / "out") for _ in range(3)]
    assert [r.folder.name for r in runs] == ["run-1", "run-2", "run-3"]
    assert len({r.folder for r in runs}) == 3 and not any(r.resumed for r in runs)
    assert runs[0].folder.parent == tmp_path / "out" / "arm-lift-1" / "heavy_payload"
    record = json.loads((runs[0].folder / "run.json").read_text())
    assert record["parent"] == "arm-lift@1" and record["store"] == str((tmp_path / "s").resolve())


def test_resume_picks_the_unfinished_run_of_the_same_store(tmp_path: Path) -> None:
    out, mine, other = tmp_path / "out", tmp_path / "mine", tmp_path / "other"
    finished = new_run("arm-lift@1", VARIANT, store_root=mine, seed=0, root=out)
    _fake_checkpoint(finished)
    mark_finished(finished, "arm-lift@2")
    interrupted = new_run("arm-lift@1", VARIANT, store_root=mine, seed=0, root=out)
    _fake_checkpoint(interrupted)
    elsewhere = new_run("arm-lift@1", VARIANT, store_root=other, seed=0, root=out)
    _fake_checkpoint(elsewhere)
    new_run("arm-lift@1", VARIANT, store_root=mine, seed=0, root=out)  # started, no checkpoint yet
    found = find_run_to_resume("arm-lift@1", VARIANT, store_root=mine, root=out)
    assert found.folder == interrupted.folder and found.resumed


def test_resume_without_an_interrupted_run_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(InvalidInputError, match=r"--resume: no interrupted retrain of arm-lift@1 on heavy_payload"):
        find_run_to_resume("arm-lift@1", VARIANT, store_root=tmp_path, root=tmp_path / "out")


def test_explicit_folder_refuses_to_overwrite_and_to_resume_nothing(tmp_path: Path) -> None:
    folder = tmp_path / "mine"
    assert explicit_run(folder, resume=False).folder == folder
    with pytest.raises(InvalidInputError, match=r"holds no checkpoint to continue"):
        explicit_run(folder, resume=True)
    _fake_checkpoint(RetrainRun(folder, resumed=False))
    with pytest.raises(InvalidInputError, match=r"already holds a retrain checkpoint; add --resume"):
        explicit_run(folder, resume=False)
    assert explicit_run(folder, resume=True).resumed


def _cli(*args: str, cwd: Path, check: bool = True) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "kinetome.library.cli.main", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=600, check=check)


def test_cli_retrains_in_two_stores_and_resumes_after_a_kill(tmp_path: Path) -> None:
    spec = str(ROOT / "configs" / "skills" / "arm-lift.yaml")
    config = tmp_path / "small.yaml"
    config.write_text("env_step_budget: 16384\nparallel_envs: 32\nsegment_steps: 64\ncheckpoint_every: 1\neval_episodes: 16\n")
    for store in ("s1", "s2"):
        _cli("register", spec, "--store", store, cwd=tmp_path)
    for store in ("s1", "s2"):  # the second run must not trip over the first run's checkpoint
        done = _cli("retrain", "arm-lift", "--variant", str(VARIANT), "--config", str(config), "--budget", "2048",
                    "--store", store, "--quiet", cwd=tmp_path)
        assert "-> arm-lift@2" in done.stdout
    runs = sorted(p.name for p in (tmp_path / "kinetome-retrain" / "arm-lift-1" / "heavy_payload").iterdir())
    assert runs == ["run-1", "run-2"]

    args = ["retrain", "arm-lift@1", "--variant", str(VARIANT), "--config", str(config), "--store", "s1", "--quiet"]
    proc = subprocess.Popen([sys.executable, "-m", "kinetome.library.cli.main", *args], cwd=tmp_path,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    pointer = tmp_path / "kinetome-retrain" / "arm-lift-1" / "heavy_payload" / "run-3" / "checkpoints" / POINTER
    deadline = time.monotonic() + 300
    while not pointer.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    resumed = _cli(*args, "--resume", cwd=tmp_path)
    assert "resuming kinetome-retrain/arm-lift-1/heavy_payload/run-3" in resumed.stderr
    assert "arm-lift@1 -> arm-lift@3" in resumed.stdout
