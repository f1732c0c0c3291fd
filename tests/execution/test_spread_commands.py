"""run, fit and check on Ray workers give the same result as in this process, bit for bit."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")

from kinetome.library import api  # noqa: E402
from kinetome.library.cli.main import main  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "library" / "checker"))
from checker_testkit import CONFIGS, write_chain  # noqa: E402


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    s = api.open_store(tmp_path_factory.mktemp("store"))
    api.register(CONFIGS / "skills" / "arm-reach-tray.yaml", store=s)
    return s


def _chain(folder: Path) -> Path:
    skills = [str(CONFIGS / "skills" / "arm-reach-tray.yaml"), str(CONFIGS / "skills" / "arm-place.yaml")]
    return write_chain(folder, "spread", skills, start=CONFIGS / "initial_states" / "arm_home_wide.yaml", episodes=40,
                       disturbances={"exploration": True, "gain_spread": 0.1})


def _check(path: Path, method: str, **where) -> dict:
    from kinetome.library.checker import check_chain

    d = check_chain(path, method=method, block_size=8, **where).to_dict()
    d.pop("timings_s")
    return d


@pytest.mark.parametrize("method", ["sim", "auto"])
def test_check_gives_the_same_result_on_one_two_and_three_workers(local_ray, tmp_path, method) -> None:
    path = _chain(tmp_path)
    here = _check(path, method)
    assert here["handoffs"], "the check decided nothing"
    for workers in (2, 3):
        assert _check(path, method, workers=workers) == here
    # and a different seed is a different result (the comparison can fail)
    assert _check(path, method, seed=99) != here


def test_run_gives_the_same_summary_on_workers(local_ray, store) -> None:
    here = api.run("arm-reach-tray", store=store, episodes=60, seed=4)
    assert api.run("arm-reach-tray", store=store, episodes=60, seed=4, workers=2) == here
    assert api.run("arm-reach-tray", store=store, episodes=60, seed=4, threads=2) == here
    assert api.run("arm-reach-tray", store=store, episodes=60, seed=5, workers=2) != here


def test_fit_gives_the_same_models_on_workers(local_ray, store) -> None:
    from kinetome.library.tasks import task_rig
    from kinetome.trainers.fitting import collect_and_fit

    skill = api.load("arm-reach-tray", store=store)
    rig = task_rig(skill.skill.env)
    fit = lambda **where: collect_and_fit(skill, rig, episodes=40, seed=2, fitted_at="2024-01-01T00:00:00Z", **where).to_files()  # noqa: E731
    here = fit()
    assert fit(workers=3) == here
    assert collect_and_fit(skill, rig, episodes=40, seed=3, fitted_at="2024-01-01T00:00:00Z").to_files() != here
    # the API and CLI path: the same held-out errors (fitted_at is the clock)
    a, b = (api.fit("arm-reach-tray", store=store, episodes=40, seed=2, **w)["errors"] for w in ({}, {"workers": 2}))
    a.pop("fitted_at", None), b.pop("fitted_at", None)
    assert a == b


def test_cli_run_on_workers_prints_the_same_json(local_ray, store, capsys) -> None:
    where = ["--store", str(store.location), "run", "arm-reach-tray", "--episodes", "30", "--json"]
    assert main(where) == 0
    here = json.loads(capsys.readouterr().out)
    assert main([*where, "--workers", "2"]) == 0
    assert json.loads(capsys.readouterr().out) == here
    assert here["schema"].startswith("kinetome.run/") and "caution" in here


@pytest.mark.parametrize("extra,message", [
    (["--workers", "2", "--threads", "2"], "--threads 2 applies to a run in this process"),
    (["--workers", "0"], "--workers must be a whole number >= 1, got 0"),
    (["--chooser", "--workers", "2"], "--chooser runs in this process only"),
])
def test_cli_refuses_conflicting_execution_flags(store, capsys, extra, message) -> None:
    assert main(["--store", str(store.location), "run", "arm-reach-tray", "--episodes", "5", *extra]) == 2
    assert message in capsys.readouterr().err
