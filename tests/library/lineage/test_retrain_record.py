"""What a retrain records inside the version, and a re-run from that record alone reproducing it bit for bit."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from kinetome.library.api import open_store, register, retrain
from kinetome.library.store import export_bundle

ROOT = Path(__file__).resolve().parents[3]
REACH = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
HEAVY = ROOT / "configs" / "variants" / "heavy_payload.yaml"
HOME = ROOT / "configs" / "initial_states" / "arm_home.yaml"

# A tiny budget: one update of 2048 samples is enough to change the parameters.
QUICK = """\
env_step_budget: 2048
parallel_envs: 8
segment_steps: 64
update_passes: 2
minibatch_size: 256
learning_rate: 0.02
gamma: 0.98
lambda: 0.95
success_bonus: 5.0
eval_episodes: 8
checkpoint_every: 4
seed: 0
"""


@pytest.fixture(scope="module")
def retrained(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("retrain")
    config = tmp / "quick.yaml"
    config.write_text(QUICK)
    with open_store(tmp / "store") as store:
        register(REACH, store=store)
        result = retrain(
            "arm-reach-tray@1", store=store, variant=HEAVY, config=config, initial_states=HOME, seed=3,
            out=tmp / "out", refit_episodes=0, promotion_episodes=40,
        )
        child = store.get(result["child"])
        bundle = export_bundle(store, child.ref, tmp / "child.tar")
        record = json.loads(store.read_file(child, "record.json"))
        files = {role: store.read_file(child, role) for role in child.roles}
    return tmp, result, child, record, files, bundle


def test_the_version_holds_variant_initial_states_config_seed_and_versions(retrained):
    _, result, child, record, files, _ = retrained
    assert files["variant.yaml"] == HEAVY.read_bytes()
    assert files["initial_states.yaml"] == HOME.read_bytes()
    assert record["variant"]["sha256"] == child.digests["variant.yaml"]
    assert record["variant"]["name"] == "heavy_payload" and record["variant"]["file"] == "heavy_payload.yaml"
    assert record["initial_states"]["sha256"] == child.digests["initial_states.yaml"]
    assert record["method"] == "retrain" and record["seed"] == 3
    assert record["config"]["parallel_envs"] == 8 and record["config"]["env_step_budget"] == 2048
    assert record["parent"] == {"ref": "arm-reach-tray@1", "identity": child.parent_identity}
    assert set(record["software"]) >= {"mujoco", "gymnasium", "numpy", "torch", "python", "platform"}
    assert record["code"]["kinetome"] and "git_commit" in record["code"]
    evaluation = json.loads(files["evaluation.json"])
    tasks = {row["task"] for row in evaluation["promotion"]["tasks"]}
    assert tasks == {"heavy_payload", "nominal"}  # trained task and the parent's own task
    assert result["promotion"]["tasks"] == evaluation["promotion"]["tasks"]


def test_the_child_is_current_exactly_where_the_promotion_test_passed(retrained):
    tmp, result, child, _, _, _ = retrained
    rows = {row["task"]: row for row in result["promotion"]["tasks"]}
    passed = [t for t in ("heavy_payload", "nominal") if rows[t]["non_inferior"]]
    assert result["current_for"] == passed
    with open_store(tmp / "store") as store:
        assert store.current_tasks(child.ref) == sorted(passed)
        for task in passed:
            entry = store.currents("arm-reach-tray")[task]
            assert entry.reason == "non-inferior" and entry.evidence["child"] == rows[task]["child"]
        if "nominal" not in passed:
            assert store.get("arm-reach-tray").ref == "arm-reach-tray@1"  # unpinned names did not move


def test_a_rerun_from_the_record_alone_reproduces_the_child_bit_for_bit(retrained):
    tmp, _, child, _, files, bundle = retrained
    fresh = tmp / "fresh-store"
    script = textwrap.dedent(
        f"""
        import json, sys
        from kinetome.library.api import open_store
        from kinetome.library.store import import_bundle
        from kinetome.library.lineage import reproduce_retrain
        with open_store({str(fresh)!r}) as store:
            import_bundle(store, {str(bundle)!r})
            out = reproduce_retrain(store, {child.ref!r}, workdir={str(tmp / 'rerun')!r})
        print(json.dumps(out))
        """
    )
    env = {**os.environ, "KINETOME_STORE": str(tmp / "unused")}
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=env, cwd=tmp, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    out = json.loads(done.stdout.strip().splitlines()[-1])
    assert out["differences"] == []
    assert out["identical"] and out["identity"] == child.identity
    assert out["digests"] == child.digests
