"""Stores and bundles made by the first wave's code (index schema 1, bundle format 1) open, migrate and import."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import tarfile
from pathlib import Path

import pytest

from kinetome.library.store import SCHEMA_VERSION, Store, export_bundle, import_bundle
from kinetome.library.store.legacy import reason_and_origin

from tests.store_backends import snapshot

FIXTURES = Path(__file__).resolve().parents[2] / "fixtures"
WAVE1 = FIXTURES / "wave1"


def _unpack(archive: Path, into: Path) -> Path:
    with tarfile.open(archive) as tar:
        tar.extractall(into, filter="data")
    return into / "store"


def _user_version(root: Path) -> int:
    conn = sqlite3.connect(root / "index.sqlite")
    try:
        return conn.execute("PRAGMA user_version").fetchone()[0]
    finally:
        conn.close()


@pytest.fixture
def wave1_store(tmp_path) -> Path:
    root = _unpack(WAVE1 / "store.tar.gz", tmp_path)
    assert _user_version(root) == 1
    return root


def test_a_wave1_store_opens_and_migrates(wave1_store):
    with Store(wave1_store) as store:
        assert _user_version(wave1_store) == SCHEMA_VERSION == 3
        assert (wave1_store / "index.sqlite.schema1").is_file()
        refs = [(v.ref, v.reason, v.parent) for s in store.list_skills() for v in store.history(s.name)]
        assert refs == [
            ("arm-hold-mlp@1", "registered", None),
            ("arm-lift@1", "registered", None),
            ("arm-lift@2", "retrained", "arm-lift@1"),
            ("arm-place@1", "registered", None),
            ("arm-reach-tray@1", "registered", None),
            ("arm-reach-tray@2", "retrained", "arm-reach-tray@1"),
            ("arm-reach-tray@3", "retrained", "arm-reach-tray@2"),
            ("walker-stand@1", "registered", None),
        ]
        two = store.get("arm-reach-tray@2")
        assert two.parent_identity == store.get("arm-reach-tray@1").identity and len(two.identity) == 64
        # unpinned names resolve as before the migration: to the newest version
        assert store.get("arm-reach-tray").ref == "arm-reach-tray@3"
        assert store.currents("arm-reach-tray")["nominal"].reason == "migrated"
        # option-model revisions are artifacts computed on their version
        (models,) = store.artifacts("arm-reach-tray@2")
        assert (models.ref, models.computed_on) == ("arm-reach-tray@2/option-models#1", (two.identity,))
        assert models.settings.get("episodes") and models.software == {}
        assert all(store.read_artifact(models, role) for role in models.roles)
        assert [n.text for n in store.notes("arm-lift@1")] == ["wave-1 fixture note: checked on the bench"]
        report = store.verify()
        assert report.ok, report.format_text()
        before = snapshot(store)
    with Store(wave1_store) as store:  # opening again changes nothing
        assert store.get("arm-reach-tray@2") == two
        assert snapshot(store) == before


def test_a_migrated_store_runs_its_skills(wave1_store):
    from kinetome.library.api import load

    with Store(wave1_store) as store:
        skill = load("arm-reach-tray@2", store=store)
        assert skill.ref == "arm-reach-tray@2" and skill.parameters["kp"].shape == (3,)


def test_the_read_commands_work_on_a_wave1_store(wave1_store, capsys):
    from kinetome.library.cli.main import main

    for command in (["list"], ["show", "arm-reach-tray@2"], ["lineage", "arm-reach-tray"], ["verify"]):
        assert main(["--store", str(wave1_store), *command]) == 0, command
    out = capsys.readouterr().out
    assert "heavy_payload" in out and "the newest version when the store was migrated" in out


def test_concurrent_first_opens_migrate_once(wave1_store):
    probe = (
        "import sys\nfrom kinetome.library.store import Store\n"
        "with Store(sys.argv[1]) as s:\n    print(len(s.list_skills()))\n"
    )
    procs = [subprocess.Popen([sys.executable, "-c", probe, str(wave1_store)], stdout=subprocess.PIPE, text=True) for _ in range(3)]
    outs = [p.communicate(timeout=120)[0].strip() for p in procs]
    assert [p.returncode for p in procs] == [0, 0, 0] and outs == ["5", "5", "5"]
    with Store(wave1_store) as store:
        assert len(store.current_history("arm-reach-tray")) == 1 and store.verify().ok


def test_a_wave1_bundle_imports_with_the_identities_migration_gives(wave1_store, tmp_path):
    with Store(tmp_path / "fresh") as fresh:
        report = import_bundle(fresh, WAVE1 / "arm-reach-tray-2.bundle.tar.gz")
        assert [v.ref for v in report.versions] == ["arm-reach-tray@1", "arm-reach-tray@2"]
        assert len(report.warnings) == 1 and "no seal" in report.warnings[0]
        with Store(wave1_store) as migrated:
            for v in report.versions:
                assert v.identity == migrated.get(v.ref).identity  # the same version, whichever way it arrived
                assert v.reason == migrated.get(v.ref).reason
            assert [a.digest for a in fresh.artifacts("arm-reach-tray@2")] == [a.digest for a in migrated.artifacts("arm-reach-tray@2")]
        assert fresh.verify().ok
        # and the migrated store's own sealed export lands in a fresh store unchanged
        with Store(wave1_store) as migrated:
            sealed = export_bundle(migrated, "arm-reach-tray@3", tmp_path / "sealed.tar.gz")
        with Store(tmp_path / "other") as other:
            again = import_bundle(other, sealed)
            assert again.warnings == () and [v.ref for v in again.versions] == ["arm-reach-tray@1", "arm-reach-tray@2", "arm-reach-tray@3"]
            assert other.get("arm-reach-tray").ref == "arm-reach-tray@3"  # current for nominal came along
            assert other.verify().ok


def test_imported_versions_get_their_reason_and_origin_back(tmp_path):
    root = _unpack(FIXTURES / "store_v1_imports" / "store.tar.gz", tmp_path)
    with Store(root) as store:
        versions = store.history("arm-reach-tray")
        assert [(v.ref, v.reason, v.parent) for v in versions] == [
            ("arm-reach-tray@1", "registered", None),
            ("arm-reach-tray@2", "registered", None),
            ("arm-reach-tray@3", "retrained", "arm-reach-tray@2"),
        ]
        assert versions[0].origin is None
        assert [v.origin["ref"] for v in versions[1:]] == ["arm-reach-tray@1", "arm-reach-tray@3"]
        assert store.verify().ok


def test_reason_and_origin_follow_earlier_imports_back():
    # meta as the first wave's import wrote it after two hops (store A -> B -> C)
    meta = {
        "imported_from": {
            "ref": "reach@4", "parent": "reach@3", "reason": "imported", "created_at": "t-b",
            "previous": {"ref": "reach@2", "parent": "reach@1", "reason": "retrained", "created_at": "t-a"},
        }
    }
    assert reason_and_origin("imported", meta) == ("retrained", {"store": None, "ref": "reach@2", "created_at": "t-a"})
    assert reason_and_origin("registered", {}) == ("registered", None)
