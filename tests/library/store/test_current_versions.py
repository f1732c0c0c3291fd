"""Lineage on re-register, and the current version per task: register, promote, roll back, resolve."""

from __future__ import annotations

import pytest

from kinetome.library.errors import InvalidInputError, NotFoundError


@pytest.fixture
def store(new_store):
    return new_store()


def _spec(n: int) -> dict[str, bytes]:
    return {"spec.json": b'{"name": "reach", "max_steps": %d}' % n, "params.safetensors": b"P" * n}


# -- registering ---------------------------------------------------------------------


def test_changed_spec_under_an_existing_name_is_revised_from_the_previous_version(store):
    first = store.register("reach", _spec(1)).version
    assert (first.ref, first.parent, first.reason) == ("reach@1", None, "registered")
    second = store.register("reach", _spec(2))
    assert second.created
    assert (second.version.ref, second.version.parent, second.version.reason) == ("reach@2", "reach@1", "revised")
    third = store.register("reach", _spec(3)).version
    assert (third.parent, third.reason) == ("reach@2", "revised")
    assert [v.ref for v in store.lineage("reach@3")] == ["reach@3", "reach@2", "reach@1"]


def test_registering_identical_content_changes_nothing(store):
    store.register("reach", _spec(1))
    store.register("reach", _spec(2))
    again = store.register("reach", _spec(1))
    assert not again.created and again.version.ref == "reach@1"
    assert store.get("reach").ref == "reach@2"  # still current for nominal: re-registering is no rollback


def test_revision_parent_is_the_nominal_current_not_the_newest(store):
    store.register("reach", _spec(1))
    store.add("reach", _spec(10), parent="reach@1", reason="retrained")  # reach@2, not current
    revised = store.register("reach", _spec(3)).version
    assert (revised.ref, revised.parent) == ("reach@3", "reach@1")


# -- current versions ----------------------------------------------------------------


def test_registering_sets_the_nominal_current_version(store):
    store.register("reach", _spec(1))
    current = store.currents("reach")
    assert list(current) == ["nominal"]
    assert (current["nominal"].version, current["nominal"].reason) == ("reach@1", "registered")
    store.register("reach", _spec(2))
    assert store.currents("reach")["nominal"].version == "reach@2"
    assert store.currents("reach")["nominal"].reason == "revised"


def test_a_stored_retrain_does_not_become_current_by_itself(store):
    store.register("reach", _spec(1))
    child = store.add("reach", _spec(7), parent="reach@1", reason="retrained").version
    assert child.ref == "reach@2"
    assert store.get("reach").ref == "reach@1"  # unpinned: the current version, not the newest
    assert store.get("reach", task="heavy_payload").ref == "reach@1"  # no current there: nominal's
    assert store.get("reach@2") == child  # pins keep working


def test_promote_per_task_and_roll_back(store):
    store.register("reach", _spec(1))
    store.add("reach", _spec(7), parent="reach@1", reason="retrained")
    store.add("reach", _spec(8), parent="reach@2", reason="retrained")
    entry = store.promote("reach@2", task="heavy_payload", evidence={"why": "passed the bench test"})
    assert (entry.task, entry.version, entry.reason) == ("heavy_payload", "reach@2", "promoted")
    assert store.get("reach", task="heavy_payload").ref == "reach@2"
    assert store.get("reach").ref == "reach@1"
    store.promote("reach@3", task="heavy_payload")
    assert store.get("reach", task="heavy_payload").ref == "reach@3"
    store.promote("reach@2", task="heavy_payload")  # rolling back = promoting an older version
    assert store.get("reach", task="heavy_payload").ref == "reach@2"
    events = store.current_history("reach")
    assert [(e.task, e.version) for e in events] == [
        ("nominal", "reach@1"),
        ("heavy_payload", "reach@2"),
        ("heavy_payload", "reach@3"),
        ("heavy_payload", "reach@2"),
    ]
    assert events[1].evidence == {"why": "passed the bench test"}
    assert sorted(store.currents("reach")) == ["heavy_payload", "nominal"]
    assert store.current_tasks("reach@2") == ["heavy_payload"] and store.current_tasks("reach@3") == []


def test_promote_refuses_bad_input_and_changes_nothing(store):
    store.register("reach", _spec(1))
    with pytest.raises(NotFoundError, match=r"reach@4 does not exist; reach has versions 1"):
        store.promote("reach@4")
    with pytest.raises(InvalidInputError, match=r"task must .*got 'heavy payload'"):
        store.promote("reach@1", task="heavy payload")
    with pytest.raises(InvalidInputError, match=r"promote needs a pinned version NAME@N, got 'reach'"):
        store.promote("reach")
    assert [(e.task, e.version) for e in store.current_history("reach")] == [("nominal", "reach@1")]


def test_a_skill_without_any_current_resolves_to_its_newest_version(store):
    # plain adds (no register) set no current: unpinned names fall back to the newest version
    store.add("walk", {"spec.json": b"1"})
    store.add("walk", {"spec.json": b"2"})
    assert store.currents("walk") == {}
    assert store.get("walk").ref == "walk@2"
