"""Several processes adding at once: no version lost, numbers unique and gap-free per name."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

WORKER = Path(__file__).with_name("store_worker.py")
WRITERS = 4
PER_WRITER = 50


def _run_all(commands: list[list[str]], go: Path) -> None:
    procs = [subprocess.Popen([sys.executable, str(WORKER), *c], stderr=subprocess.PIPE, text=True) for c in commands]
    go.touch()  # all start adding at (nearly) the same moment
    errors = []
    for p in procs:
        _, err = p.communicate(timeout=240)
        if p.returncode != 0:
            errors.append(err)
    assert not errors, "\n".join(errors)


@pytest.mark.parametrize(
    "shared_name, precreate",
    [(True, True), (False, True), (True, False)],
    ids=["same-name", "distinct-names", "same-name-all-creating-the-store"],
)
def test_parallel_adders_lose_nothing(new_store, store_places, tmp_path, shared_name, precreate):
    go = tmp_path / "go"
    if precreate:
        new_store().close()
    names = ["shared"] * WRITERS if shared_name else [f"skill-{w}" for w in range(WRITERS)]
    _run_all([["add", *store_places.args(), names[w], str(w), str(PER_WRITER), str(go)] for w in range(WRITERS)], go)

    with new_store(create=False) as store:
        assert store.verify().ok
        versions = [v for name in sorted(set(names)) for v in store.history(name)]
        assert len(versions) == WRITERS * PER_WRITER
        for name in set(names):
            numbers = [v.number for v in store.history(name)]
            assert numbers == list(range(1, len(numbers) + 1)), f"{name}: numbers must be unique and gap-free"
        written = sorted((v.meta["writer"], v.meta["i"]) for v in versions)
        assert written == [(w, i) for w in range(WRITERS) for i in range(PER_WRITER)], "a version was lost or doubled"


def test_parallel_identical_adds_create_each_version_once(new_store, store_places, tmp_path):
    go = tmp_path / "go"
    new_store().close()
    count = 20
    _run_all([["same", *store_places.args(), "twin", str(count), str(go)] for _ in range(WRITERS)], go)
    with new_store(create=False) as store:
        history = store.history("twin")
        assert [v.number for v in history] == list(range(1, count + 1))
        # each distinct content exists exactly once, whichever writer got there first
        assert sorted(v.meta["i"] for v in history) == list(range(count))


def test_parallel_promotions_and_roll_backs_are_serialised(new_store, store_places, tmp_path):
    """Each promotion reads the current version and appends the next one under the write lock:
    every entry's "was" is the version the entry before it made current."""
    go = tmp_path / "go"
    with new_store() as store:
        store.register("reach", {"spec.json": b"1"})
        store.register("reach", {"spec.json": b"2"})
    count = 25
    _run_all([["promote", *store_places.args(), "reach", str(count), str(go)] for _ in range(WRITERS)], go)
    with new_store(create=False) as store:
        history = store.current_history("reach")
        assert len(history) == 2 + WRITERS * count  # two registrations, then every promotion
        log = [e for e in store.audit_log("reach") if e.action in ("promoted", "rolled-back")]
        assert len(log) == WRITERS * count
        made_current = [history[1].version] + [e.subject.split(" ")[0] for e in log]
        assert [e.detail["from"] for e in log] == made_current[:-1]
        assert all((e.action == "rolled-back") == (e.detail["from"] == "reach@2" and e.subject.startswith("reach@1")) for e in log)
        assert store.verify().ok
