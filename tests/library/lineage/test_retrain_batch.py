"""Retrain batch: one child per variant, stored in the order given with its lineage, promoted per
variant by the promotion rule, compared on its own variant and on nominal; tiny budgets."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from kinetome.library import api
from kinetome.library.cli.main import main
from kinetome.library.errors import InvalidInputError
from kinetome.library.lineage.batch import retrain_batch

CONFIGS = Path(__file__).resolve().parents[3] / "configs"
VARIANTS = [CONFIGS / "variants" / "heavy_payload.yaml", CONFIGS / "variants" / "weak_motors.yaml"]
TINY = dict(initial_states=CONFIGS / "initial_states" / "arm_clearance.yaml", config=CONFIGS / "training" / "demo_quick.yaml",
            env_step_budget=2048, promotion_episodes=40, refit_episodes=0)


def _store(tmp: Path):
    store = api.open_store(tmp / "store")
    api.register(CONFIGS / "skills" / "arm-reach-tray.yaml", store=store)
    return store


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("batch")
    store = _store(tmp)
    return store, retrain_batch("arm-reach-tray", store=store, variants=VARIANTS, out=tmp / "runs", **TINY), tmp


def test_one_child_per_variant_with_lineage_in_the_order_given(batch) -> None:
    store, result, _ = batch
    children = result["children"]
    assert [c["child"] for c in children] == ["arm-reach-tray@2", "arm-reach-tray@3"]
    assert [Path(c["variant"]).name for c in children] == ["heavy_payload.yaml", "weak_motors.yaml"]
    for c in children:
        v = store.get(c["child"])
        assert v.reason == "retrained" and v.parent == "arm-reach-tray@1"
        assert c["lineage"] == [c["child"], "arm-reach-tray@1"]
    assert result["schema"] == "kinetome.retrain-batch/1" and "ISO 12100" in result["caution"]


def test_promotion_rule_applied_per_variant(batch) -> None:
    store, result, _ = batch
    for c in result["children"]:
        rows = {r["task"]: r for r in c["promotion"]["tasks"]}
        variant = json.loads(store.read_file(store.get(c["child"]), "record.json"))["variant"]["name"]
        assert "trained" in rows[variant]["roles"] and "nominal" in rows["nominal"]["roles"]
        # current exactly where the rule found it non-inferior (trained task or nominal), nowhere else
        expected = [t for t in (variant, "nominal") if rows[t]["non_inferior"]]
        assert sorted(c["current_for"]) == sorted(expected) == sorted(store.current_tasks(c["child"]))


def test_comparison_table_shows_own_variant_and_nominal(batch) -> None:
    _, result, _ = batch
    rows = result["comparison"]
    assert [r["variant"] for r in rows] == ["heavy_payload", "weak_motors"]
    for row, c in zip(rows, result["children"]):
        by_role = {role: r for r in c["promotion"]["tasks"] for role in r["roles"]}
        k, n = by_role["trained"]["child"]["successes"], by_role["trained"]["child"]["episodes"]
        assert row["own_child"] == f"{k}/{n} = {k / n:.3f}" and n == 40
        k, n = by_role["nominal"]["child"]["successes"], by_role["nominal"]["child"]["episodes"]
        assert row["nominal_child"] == f"{k}/{n} = {k / n:.3f}"


def test_repeating_the_batch_stores_nothing_new(batch) -> None:
    store, result, tmp = batch
    started: list[int] = []
    again = retrain_batch("arm-reach-tray@1", store=store, variants=VARIANTS, out=tmp / "again", on_start=started.append, **TINY)
    assert started == [len(VARIANTS)]  # told once, with the number of trainings (the CLI's 'retraining ...' line)
    assert [c["child"] for c in again["children"]] == [c["child"] for c in result["children"]]
    assert not any(c["is_new"] for c in again["children"])


def test_bad_batches_are_refused(tmp_path, capsys) -> None:
    store = _store(tmp_path)
    with pytest.raises(InvalidInputError, match="heavy_payload more than once"):
        retrain_batch("arm-reach-tray", store=store, variants=[VARIANTS[0], VARIANTS[0]], **TINY)
    s = ["--store", str(store.location), "retrain", "arm-reach-tray"]
    for args in ([], ["--variant", str(VARIANTS[0]), "--variants", str(VARIANTS[1])]):  # exactly one of --variant, --variants
        with pytest.raises(SystemExit) as info:
            main([*s, *args])
        assert info.value.code == 2
    assert main([*s, "--variants", str(VARIANTS[0]), "--resume"]) == 2 and "not to a batch" in capsys.readouterr().err
    assert main([*s, "--variant", str(VARIANTS[0]), "--address", "auto"]) == 2
    bad = tmp_path / "misspelt.yaml"
    bad.write_text("name: misspelt\npayload: 5\n")
    capsys.readouterr()
    assert main([*s, "--variants", str(VARIANTS[0]), str(bad)]) == 2
    err = capsys.readouterr().err
    assert "payload: unknown field" in err and "retraining" not in err  # refused before any 'retraining ...' banner


def test_children_are_identical_on_one_and_two_ray_workers(tmp_path, monkeypatch) -> None:
    """Training runs with one torch thread wherever it runs: with more threads in this process the heavy-payload
    child's parameters differed from a worker's in the last bits (seen while building this), so its identity did."""
    ray = pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")
    if ray.is_initialized():
        pytest.skip("a Ray started elsewhere in this process is running")
    monkeypatch.setenv("RAY_ADDRESS", "local")  # a private Ray even if another process runs a cluster on this machine
    identities = []
    for workers in (1, 2):
        store = _store(tmp_path / f"w{workers}")
        result = retrain_batch("arm-reach-tray", store=store, variants=VARIANTS, out=tmp_path / f"runs{workers}", workers=workers,
                               **{**TINY, "promotion_episodes": 20})
        identities.append([store.get(c["child"]).identity for c in result["children"]])
    assert identities[0] == identities[1]
    assert not ray.is_initialized()


def test_a_batch_can_run_again_in_a_new_folder_and_refuses_an_out_with_checkpoints(tmp_path, monkeypatch):
    # The same batch twice: each run claims its own run-K folder (the second used to stop at the first's checkpoints).
    from kinetome.library.errors import InvalidInputError
    from kinetome.library.lineage.batch import _batch_folder

    monkeypatch.chdir(tmp_path)
    first, second = _batch_folder("arm-reach-tray@2", None), _batch_folder("arm-reach-tray@2", None)
    assert first != second and first.parent == second.parent == Path("kinetome-retrain") / "arm-reach-tray-2-batch"
    assert [first.name, second.name] == ["run-1", "run-2"]
    out = tmp_path / "mine"
    assert _batch_folder("arm-reach-tray@2", out) == out  # an empty --out is used as given
    (out / "heavy_payload" / "checkpoints").mkdir(parents=True)
    (out / "heavy_payload" / "checkpoints" / "latest.json").write_text("{}")
    with pytest.raises(InvalidInputError, match="already holds checkpoints of an earlier batch \\(heavy_payload\\)"):
        _batch_folder("arm-reach-tray@2", out)
