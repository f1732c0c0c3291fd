"""`kinetome promote` as a user runs it: promote, roll back, and what lineage says about it."""

from __future__ import annotations

import json
from pathlib import Path

from kinetome.library.api import open_store, register, spec_version_files
from kinetome.library.cli.main import main
from kinetome.library.spec_load import load_spec

REACH = Path(__file__).resolve().parents[3] / "configs" / "skills" / "arm-reach-tray.yaml"


def test_promote_and_roll_back_from_the_command_line(tmp_path, capsys):
    root = str(tmp_path / "store")
    with open_store(root) as store:
        register(REACH, store=store)
        files = {**spec_version_files(load_spec(REACH)), "normaliser.safetensors": b"child"}
        store.add("arm-reach-tray", files, parent="arm-reach-tray@1", reason="retrained")
    # a misspelt task is refused, naming the known ones, and nothing changes
    assert main(["--store", root, "promote", "arm-reach-tray@2", "--task", "nominl"]) == 2
    err = capsys.readouterr().err
    assert "--task 'nominl'" in err and "known tasks: nominal" in err and "variant file" in err
    # a new task is named by its variant file
    heavy = str(REACH.parents[1] / "variants" / "heavy_payload.yaml")
    assert main(["--store", root, "promote", "arm-reach-tray@2", "--task", heavy, "--note", "bench test passed"]) == 0
    assert "arm-reach-tray@2 is now current for heavy_payload" in capsys.readouterr().out
    assert main(["--store", root, "promote", "arm-reach-tray@1", "--task", "heavy_payload", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["version"], out["previous"]) == ("arm-reach-tray@1", "arm-reach-tray@2")
    assert main(["--store", root, "lineage", "arm-reach-tray", "--json"]) == 0
    view = json.loads(capsys.readouterr().out)
    assert [(c["task"], c["version"]) for c in view["changes"]] == [
        ("nominal", "arm-reach-tray@1"), ("heavy_payload", "arm-reach-tray@2"), ("heavy_payload", "arm-reach-tray@1"),
    ]
    assert main(["--store", root, "lineage", "arm-reach-tray"]) == 0
    text = capsys.readouterr().out
    assert "heavy_payload  arm-reach-tray@1  promoted by hand" in text
    # a bare name, an unknown version and a bad task are refused with exit 2, nothing changes
    for args in (["arm-reach-tray"], ["arm-reach-tray@9"], ["arm-reach-tray@1", "--task", "heavy payload"]):
        assert main(["--store", root, "promote", *args]) == 2
    assert "promote needs a pinned version" in capsys.readouterr().err
    with open_store(root) as store:
        assert len(store.current_history("arm-reach-tray")) == 3
