"""The audit log: who did what when, chained by digests so verify finds edited or removed entries."""

from __future__ import annotations

import re

import pytest

from kinetome.library.store import ACTOR_ENV_VAR, export_bundle, import_bundle
from kinetome.library.store.audit import entry_digest
from kinetome.library.store.schema import EMPTY_DIGEST
from tests.store_backends import raw_sql


@pytest.fixture
def store(new_store, monkeypatch):
    monkeypatch.setenv(ACTOR_ENV_VAR, "ada")
    s = new_store()
    s.register("reach", {"spec.json": b"1"})
    s.register("reach", {"spec.json": b"2"})  # revised, current for nominal
    s.add("reach", {"spec.json": b"3"}, parent="reach@2", reason="retrained")
    s.promote("reach@3", task="heavy", reason="non-inferior", evidence={"child": "58/64 = 0.91"})
    s.promote("reach@1")  # back from reach@2: a roll-back
    return s


def test_every_change_is_logged_with_who_when_and_what(store, new_store, tmp_path, monkeypatch):
    log = store.audit_log()
    assert [(e.seq, e.action, e.subject) for e in log] == [
        (1, "registered", "reach@1"),
        (2, "revised", "reach@2"),
        (3, "retrained", "reach@3"),
        (4, "promoted", "reach@3 for heavy"),
        (5, "rolled-back", "reach@1 for nominal"),
    ]
    assert {e.actor for e in log} == {"ada"} and all(e.created_at.endswith("Z") for e in log)
    assert log[1].detail == {"identity": store.get("reach@2").identity, "parent": "reach@1", "current_for": ["nominal"]}
    assert log[3].detail == {"task": "heavy", "from": None, "reason": "non-inferior", "evidence": {"child": "58/64 = 0.91"}}
    assert log[4].detail["from"] == "reach@2"
    # a promotion forward again is not a roll-back
    assert store.promote("reach@2").version == "reach@2" and store.audit_log()[-1].action == "promoted"
    # the chain: each entry carries the digest of the one before
    assert log[0].previous == EMPTY_DIGEST and all(b.previous == a.digest for a, b in zip(log, log[1:]))

    monkeypatch.setenv(ACTOR_ENV_VAR, "grace")
    with new_store("other") as other:
        import_bundle(other, export_bundle(store, "reach@3", tmp_path / "r.tar"))
        entries = other.audit_log("reach")
        assert [(e.action, e.subject, e.actor) for e in entries] == [
            ("imported", "reach@1", "grace"), ("imported", "reach@2", "grace"), ("imported", "reach@3", "grace"),
        ]
        assert entries[2].detail["origin"]["ref"] == "reach@3" and entries[2].detail["bundle"] == "r.tar"
        assert other.verify().ok


def test_identical_re_adds_log_nothing(store):
    before = store.audit_log()
    assert not store.register("reach", {"spec.json": b"2"}).is_new
    assert not store.add("reach", {"spec.json": b"3"}, parent="reach@1", reason="retrained").is_new
    assert store.audit_log() == before


def test_the_log_of_one_skill(store):
    store.register("lift", {"spec.json": b"L"})
    assert [e.subject for e in store.audit_log("lift")] == ["lift@1"]
    assert len(store.audit_log("reach@2")) == 5  # a ref means its skill


@pytest.mark.parametrize(
    "sql, message",
    [
        ("UPDATE audit_log SET actor = 'mallory' WHERE seq = 2", r"audit entry 2 \(revised reach@2\) no longer matches its digest"),
        ("UPDATE audit_log SET detail = '{}' WHERE seq = 4", r"audit entry 4 .* no longer matches its digest"),
        ("DELETE FROM audit_log WHERE seq = 3", r"audit entry 3 is missing \(the next is 4\)"),
        ("DELETE FROM audit_log WHERE seq = 1", r"audit entry 1 is missing"),
        ("DELETE FROM audit_log WHERE seq = 5", r"the audit log ends at entry 4 but the store recorded its last entry as 5"),
    ],
    ids=["edited-actor", "edited-detail", "removed-middle", "removed-first", "removed-last"],
)
def test_verify_finds_edited_and_removed_entries(store, sql, message):
    assert store.verify().ok  # the untouched log verifies
    raw_sql(store, sql)
    report = store.verify()
    assert not report.ok and any(re.search(message, p) for p in report.index_problems), report.index_problems


def test_a_consistently_rewritten_entry_is_still_caught_by_its_successor(store):
    """Recomputing the edited entry's own digest breaks the link from the entry after it."""
    e = store.audit_log()[1]
    forged = entry_digest(e.seq, "mallory", e.created_at, e.action, e.name, e.subject, e.detail_json, e.previous)
    raw_sql(store, "UPDATE audit_log SET actor = 'mallory', digest = ? WHERE seq = 2", (forged,))
    problems = store.verify().index_problems
    assert problems == ("audit entry 3 does not follow the entry before it (an entry was removed or reordered); "
                        "the audit log was changed outside kinetome: restore the index from a backup",)
