"""Unpinned names resolve to the current version for the task at hand; identity pins work in chain files."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetome.library.api import open_store, register, spec_version_files
from kinetome.library.spec_load import load_spec

ROOT = Path(__file__).resolve().parents[3]
REACH = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
HEAVY = ROOT / "configs" / "variants" / "heavy_payload.yaml"


@pytest.fixture
def store(tmp_path):
    with open_store(tmp_path / "store") as s:
        register(REACH, store=s)
        files = dict(spec_version_files(load_spec(REACH)))
        files["normaliser.safetensors"] = b"a retrained child: other files, same spec"
        s.add("arm-reach-tray", files, parent="arm-reach-tray@1", reason="retrained")
        s.promote("arm-reach-tray@2", task="heavy_payload")
        yield s


def test_a_rig_resolves_a_bare_name_through_its_variant(store):
    from kinetome.library.runtime.skill import load_skill
    from kinetome.library.tasks import load_variant_file, task_rig

    heavy = task_rig("kinetome/BenchArm-v0", load_variant_file(HEAVY))
    nominal = task_rig("kinetome/BenchArm-v0")
    assert load_skill(store, "arm-reach-tray", rig=heavy).ref == "arm-reach-tray@2"
    assert load_skill(store, "arm-reach-tray", rig=nominal).ref == "arm-reach-tray@1"
    assert load_skill(store, "arm-reach-tray@1", rig=heavy).ref == "arm-reach-tray@1"  # a pin is a pin


def test_a_chain_may_pin_a_version_by_identity(store, tmp_path):
    from kinetome.library.checker.chain import parse_chain_text, resolve_skills

    identity = store.get("arm-reach-tray@2").identity
    text = f"name: pinned\ntask:\n  env: kinetome/BenchArm-v0\nskills: [arm-reach-tray@id:{identity[:16]}]\n"
    chain = parse_chain_text(text, base=tmp_path, store=store)
    resolve_skills(chain, store)
    assert store.get(chain.skills[0]).ref == "arm-reach-tray@2"
    from kinetome.library.errors import InvalidInputError

    missing = text.replace(identity[:16], "0" * 16)
    with pytest.raises(InvalidInputError, match=r"no version of arm-reach-tray has identity 0000000000000000"):
        parse_chain_text(missing, base=tmp_path, store=store)
