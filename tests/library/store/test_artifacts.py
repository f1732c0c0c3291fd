"""Artifacts, the one kind of stored evidence: provenance, digest, lookup for reuse, bundles and verify."""

from __future__ import annotations

import json

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.store import ARTIFACT_KINDS, artifact_digest, export_bundle, import_bundle
from tests.store_backends import raw_sql

TASK = {"env": "kinetome/BenchArm-v0", "variant": "heavy_payload", "variant_digest": "ab" * 32}
SETTINGS = {"episodes": 200, "seed": 0, "method": "simulation"}
SOFTWARE = {"mujoco": "3.3.0", "numpy": "2.1.0", "python": "3.11.7"}


@pytest.fixture
def store(new_store):
    s = new_store()
    s.register("reach", {"spec.json": b'{"reach": 1}'})
    s.register("place", {"spec.json": b'{"place": 1}'})
    return s


def _ids(store, *refs):
    return [store.get(r).identity for r in refs]


def test_an_artifact_carries_identities_software_and_a_digest(store):
    chain = _ids(store, "reach@1", "place@1")
    a = store.attach_artifact(
        "reach@1", "check-result", {"result.json": b'{"verdict": "composes"}'},
        computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE, meta={"summary": "1 handoff composes"},
    )
    assert (a.ref, a.kind, a.revision) == ("reach@1/check-result#1", "check-result", 1)
    assert a.computed_on == tuple(chain) and a.task == TASK and a.settings == SETTINGS and a.software == SOFTWARE
    assert a.digest == artifact_digest(
        kind="check-result", computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE,
        files={"result.json": a.digests["result.json"]}, meta={"summary": "1 handoff composes"},
    )
    assert store.read_artifact(a, "result.json") == b'{"verdict": "composes"}'


def test_lookup_finds_the_same_identities_task_and_settings_only(store):
    chain = _ids(store, "reach@1", "place@1")
    stored = store.attach_artifact("reach@1", "check-result", {"result.json": b"{}"}, computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE)
    assert store.find_artifact("check-result", computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE) == stored
    assert store.find_artifact("check-result", computed_on=chain, task=TASK, settings=dict(SETTINGS), software=None) == stored
    misses = {
        "other settings": dict(computed_on=chain, task=TASK, settings={**SETTINGS, "episodes": 100}, software=SOFTWARE),
        "other task": dict(computed_on=chain, task={**TASK, "variant": "nominal"}, settings=SETTINGS, software=SOFTWARE),
        "other order": dict(computed_on=chain[::-1], task=TASK, settings=SETTINGS, software=SOFTWARE),
        "other software": dict(computed_on=chain, task=TASK, settings=SETTINGS, software={**SOFTWARE, "mujoco": "3.4.0"}),
    }
    for what, key in misses.items():
        assert store.find_artifact("check-result", **key) is None, what
    assert store.find_artifact("sweep", computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE) is None
    # a newer result for the same key is the one found
    newer = store.attach_artifact("reach@1", "check-result", {"result.json": b'{"n": 2}'}, computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE)
    assert store.find_artifact("check-result", computed_on=chain, task=TASK, settings=SETTINGS) == newer


def test_option_models_are_artifacts(store):
    m = store.attach_model("reach@1", "option-models", {"models.json": b"{}"}, {"episodes": 200})
    (a,) = store.artifacts("reach@1")
    assert a == m and a.kind == "option-models" and a.computed_on == (store.get("reach@1").identity,)
    assert a.ref == "reach@1/option-models#1"


def test_bad_artifacts_are_refused(store):
    with pytest.raises(InvalidInputError, match=r"computed_on\[0\] must be a version identity .* got 'reach@1'"):
        store.attach_artifact("reach@1", "sweep", {"a.json": b"{}"}, computed_on=["reach@1"])
    with pytest.raises(InvalidInputError, match=r"settings must hold only JSON values"):
        store.attach_artifact("reach@1", "sweep", {"a.json": b"{}"}, settings={"x": object()})
    assert store.artifacts("reach@1") == []


@pytest.mark.parametrize("kind", ARTIFACT_KINDS)
def test_every_artifact_kind_survives_export_import_and_verify(store, new_store, tmp_path, kind):
    assert set(ARTIFACT_KINDS) >= {"option-models", "check-result", "sweep", "initiation-proposal"}
    chain = _ids(store, "reach@1")
    a = store.attach_artifact("reach@1", kind, {"data.json": json.dumps({"kind": kind}).encode()}, computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE)
    path = export_bundle(store, "reach@1", tmp_path / f"{kind}.tar")
    with new_store("other") as other:
        import_bundle(other, path)
        (b,) = other.artifacts("reach@1")
        assert (b.ref, b.digest, b.computed_on, b.task, b.settings, b.software) == (a.ref, a.digest, a.computed_on, a.task, a.settings, a.software)
        assert other.read_artifact(b, "data.json") == store.read_artifact(a, "data.json")
        assert other.find_artifact(kind, computed_on=chain, task=TASK, settings=SETTINGS, software=SOFTWARE) == b
        assert other.verify().ok
        raw_sql(other, "UPDATE artifacts SET settings = ?", (json.dumps({**SETTINGS, "episodes": 5}),))
        report = other.verify()
        assert not report.ok and any(f"reach@1/{kind}#1" in p and "digest" in p for p in report.index_problems)


def test_check_results_are_reused(store):
    from kinetome.library.evidence import find_check_result, store_check_result

    refs = ["reach@1", "place@1"]
    result = {"handoffs": [{"verdict": "composes", "successes": 98, "episodes": 100}]}
    assert find_check_result(store, refs, task=TASK, settings=SETTINGS) is None
    stored = store_check_result(store, refs, task=TASK, settings=SETTINGS, result=result)
    found = find_check_result(store, refs, task=TASK, settings=SETTINGS)
    assert found is not None and found.result == result and found.reused and found.artifact == stored
    assert find_check_result(store, refs, task=TASK, settings={**SETTINGS, "seed": 1}) is None
    # a new version of a skill in the chain is another chain of identities
    store.register("place", {"spec.json": b'{"place": 2}'})
    assert find_check_result(store, ["reach", "place"], task=TASK, settings=SETTINGS) is None
    assert find_check_result(store, ["reach", "place@1"], task=TASK, settings=SETTINGS) is not None
