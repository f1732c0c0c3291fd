"""A store and a bundle written by the code at commit 00e2678 (tests/fixtures/wave1) still open."""

from __future__ import annotations

import json
import tarfile
from pathlib import Path

import pytest

from kinetome.library.cli.main import main
from kinetome.library.store import Store, import_bundle

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "wave1"


@pytest.fixture
def old_store(tmp_path) -> Path:
    with tarfile.open(FIXTURES / "store.tar.gz") as tar:
        tar.extractall(tmp_path, filter="data")
    return tmp_path / "store"


def test_old_store_verifies_and_lists(old_store, capsys) -> None:
    assert main(["--store", str(old_store), "verify"]) == 0
    assert "8 versions" in capsys.readouterr().out
    with Store(old_store, create=False) as store:
        names = {s.name for s in store.list_skills()}
        assert names == {"arm-hold-mlp", "arm-lift", "arm-place", "arm-reach-tray", "walker-stand"}
        assert [v.ref for v in store.lineage("arm-reach-tray@3")] == ["arm-reach-tray@3", "arm-reach-tray@2", "arm-reach-tray@1"]
        assert [n.text for n in store.notes("arm-lift@1")] == ["wave-1 fixture note: checked on the bench"]
        assert {m.kind for m in store.models("arm-reach-tray@2")}


def test_old_bundle_imports(tmp_path) -> None:
    with Store(tmp_path / "fresh") as store:
        imported = import_bundle(store, FIXTURES / "arm-reach-tray-2.bundle.tar.gz")
        assert [v.ref for v in imported.versions] == ["arm-reach-tray@1", "arm-reach-tray@2"]
        assert store.models("arm-reach-tray@2")


def test_old_json_outputs_are_kept_verbatim() -> None:
    history = json.loads((FIXTURES / "json" / "history.json").read_text())
    assert [h["reason"] for h in history] == ["registered", "retrained", "retrained"]


def _json(capsys, *args: str) -> dict:
    assert main(list(args)) == 0
    return json.loads(capsys.readouterr().out)


def test_old_versions_show_under_todays_names(old_store, capsys) -> None:
    store = str(old_store)
    mlp = _json(capsys, "--store", store, "show", "arm-hold-mlp@1", "--json")
    assert mlp["spec"]["controller"]["settings"]["hidden"] == [8] and "options" not in mlp["spec"]["controller"]
    retrained = _json(capsys, "--store", store, "show", "arm-reach-tray@2", "--json")["meta"]
    assert retrained["method"] == "retrain" and retrained["env_steps"] == 49152 and "steps" not in retrained
    assert retrained["config"]["parallel_envs"] == 32 and retrained["config"]["lambda"] == 0.95 and "n_envs" not in retrained["config"]
    after = retrained["metrics_after"]
    assert after["successes"] == round(after["success_rate"] * after["episodes"]) and "mean_duration" in after and "mean_steps" not in after
    trained = _json(capsys, "--store", store, "show", "arm-reach-tray@3", "--json")["meta"]
    assert trained["method"] == "train" and trained["variant"] == {"file": "/tmp/vocab-fx/files/variant_old.yaml", "name": None, "digest": None}
    assert "stop_rate" in trained and "termination_rate" not in trained
    models = _json(capsys, "--store", store, "show", "arm-lift@1", "--json")["models"][0]["errors"]
    assert set(models["outcomes"]) == {"stopped", "timed_out", "env_ended", "refused"} and "duration" in models["duration"]
    lineage = _json(capsys, "--store", store, "lineage", "arm-reach-tray", "--json")
    assert [(v["reason"], v["method"]) for v in lineage["versions"]] == [("registered", None), ("retrained", "retrain"), ("retrained", "train")]


def test_old_versions_still_run_and_their_models_load(old_store, capsys) -> None:
    from kinetome.library.api import load_models, open_store, run

    store = open_store(old_store, create=False)
    summary = run("arm-hold-mlp@1", store=store, episodes=4)  # controller.options stored in spec.json
    assert summary["episodes"] == 4
    # a walker skill stored before the walker's MJCF names changed: named-state quantities stayed
    walker = run("walker-stand@1", store=store, episodes=4)
    assert walker["successes"] == 4 and "standards for that type of machine" in walker["caution"]
    models = load_models("arm-lift@1", store=store)
    assert set(models.meta.outcomes) == {"stopped", "timed_out", "env_ended", "refused"}
    assert models.duration.head.outputs[0] == "duration"
