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
        assert [v.ref for v in imported] == ["arm-reach-tray@1", "arm-reach-tray@2"]
        assert store.models("arm-reach-tray@2")


def test_old_json_outputs_are_kept_verbatim() -> None:
    history = json.loads((FIXTURES / "json" / "history.json").read_text())
    assert [h["reason"] for h in history] == ["registered", "retrained", "retrained"]
