"""`kinetome plan` on the shipped library from a fresh store: finds, confirms, writes a chain file that checks.

Every run registers configs/skills into an empty store first (a clean clone has no option
models, so the search measures each skill in simulation where it has no models).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from kinetome.library.cli.main import main

ROOT = Path(__file__).resolve().parents[3]
HOME = str(ROOT / "configs" / "initial_states" / "arm_home.yaml")
SETTLED = "norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.02"
BASE = ["--env", "kinetome/BenchArm-v0", "--initial-states", HOME, "--particles", "50"]


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    path = tmp_path_factory.mktemp("plan") / "store"
    assert main(["--store", str(path), "register", *map(str, sorted((ROOT / "configs" / "skills").glob("*.yaml")))]) == 0
    return str(path)


def test_plan_finds_and_confirms_the_pick_and_place_chain(store, tmp_path, capsys):
    out = tmp_path / "plan"
    code = main(["--store", store, "plan", *BASE, "--goal", SETTLED, "--begin-with", "arm-lift", "--top", "2", "--out", str(out)])
    text = capsys.readouterr().out
    assert code == 0, text
    assert "chosen: arm-lift@1 -> arm-reach-tray@1 -> arm-place@1" in text
    assert "Caution:" in text
    chain_file = out / "planned-chain.yaml"
    assert (out / "check" / "summary.txt").is_file() and (out / "plan.json").is_file()
    # the chain file is ready for kinetome check, and it passes
    assert main(["--store", store, "check", str(chain_file), "--quiet"]) == 0
    from kinetome.library.api import open_store
    from kinetome.library.checker import load_chain

    chain = load_chain(chain_file, store=open_store(store))
    assert chain.skills == ("arm-lift@1", "arm-reach-tray@1", "arm-place@1")
    data = json.loads((out / "plan.json").read_text())
    assert data["schema"] == "kinetome.plan/1" and data["caution"].startswith("Caution")
    assert data["winner"] == list(chain.skills)
    # the ranking bound is the check's own whole-chain lower bound (59 of 59 clean episodes: 0.05 ** (1 / 59))
    report = json.loads((out / "check" / "result.json").read_text())
    best = data["confirmed"][0]
    assert best["lower_bound"] == pytest.approx(report["whole_chain"]["success"]["lower_bound"])
    assert best["lower_bound"] >= 0.95 and best["goal_successes"] == best["episodes"] > 0
    assert best["mean_duration_steps"] == pytest.approx(report["whole_chain"]["duration"]["success_mean"])


def test_plan_from_the_whole_library_ranks_by_measured_bound_then_duration(store, tmp_path, capsys):
    code = main(["--store", store, "plan", *BASE, "--goal", SETTLED, "--top", "3", "--json", "--out", str(tmp_path / "p")])
    data = json.loads(capsys.readouterr().out)
    assert code == 0 and data["schema"] == "kinetome.plan/1" and "caution" in data
    confirmed = data["confirmed"]
    chains = [c["skills"] for c in confirmed]
    assert data["winner"] == ["arm-reach-tray@1", "arm-place@1"]  # the shortest chain that settles at the tray
    assert ["arm-lift@1", "arm-reach-tray@1", "arm-place@1"] in chains
    passed = [c for c in confirmed if c["failure"] is None]
    keys = [(-c["lower_bound"], c["mean_duration_steps"]) for c in passed]
    assert keys == sorted(keys)
    assert data["search"]["pruned"] > 0  # z3 ruled handoffs out (e.g. arm-lift after arm-place)


def test_no_chain_found_names_the_closest_candidate(store, tmp_path, capsys):
    # at rest at the tray, for the hand-over: the skills that reach the tray stop still moving, and arm-release
    # refuses their end states
    goal = "all(abs(qvel) <= 0.01) and norm(fingertip - target) < 0.03"
    code = main(["--store", store, "plan", *BASE, "--goal", goal, "--max-length", "3", "--out", str(tmp_path / "none")])
    text = capsys.readouterr().out
    assert code == 1
    assert "no chain found" in text and "closest candidate: arm-reach-tray@1" in text
    assert "failing handoff arm-reach-tray@1 -> goal: none of the end states" in text and "abs(qvel" in text


@pytest.mark.parametrize(
    "args, message",
    [
        (["--goal", SETTLED, "--max-length", "0"], "--max-length: must be a whole number >= 1, got 0"),
        (["--goal", "norm(fingertip - ", "--max-length", "2"], "--goal: goal: invalid syntax"),
        (["--goal", "norm(elbow) < 1"], "unknown name 'elbow'"),
        (["--goal", SETTLED, "--skills", "arm-nothing"], "arm-nothing"),
        (["--goal", SETTLED, "--skills", "walker-walk"], "another robot"),
        (["--goal", SETTLED, "--require", "1.5"], "--require: must be a number strictly between 0 and 1"),
        (["--goal", SETTLED, "--variant", "no-such.yaml"], "--variant: file no-such.yaml not found"),
        (["--goal", SETTLED, "--begin-with", "arm-lift", "arm-reach-tray", "--max-length", "1"], "--begin-with"),
    ],
)
def test_bad_input_is_exit_2_naming_the_option(store, args, message, capsys):
    code = main(["--store", store, "plan", "--env", "kinetome/BenchArm-v0", *args])
    err = capsys.readouterr().err
    assert code == 2, err
    assert message in err and "Traceback" not in err
    assert "goal: goal: goal:" not in err and err.count("write one Python-style expression") <= 1  # each part said once
