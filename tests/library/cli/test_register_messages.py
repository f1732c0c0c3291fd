"""Register's messages name each field once, say the rule that failed, and handle several files one by one."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from kinetome.library.cli.main import main
from kinetome.library.errors import InvalidSpecError
from kinetome.library.spec_load import parse_spec_text

ROOT = Path(__file__).resolve().parents[3]
GOOD = (ROOT / "configs" / "skills" / "arm-lift.yaml").read_text()


@pytest.mark.parametrize(
    "old, new, expected",
    [
        ("exploration_std: 0.2", "exploration_std: 0.0", "spec.yaml:13: controller.exploration_std: must be > 0, got 0.0"),
        ("exploration_std: 0.2", "exploration_std: [0.2, -0.1, 0.1]", "controller.exploration_std: must be > 0 at element 1, got -0.1"),
        ("exploration_std: 0.2", "exploration_std: fast", "controller.exploration_std: must be a number or a list of numbers, got 'fast'"),
        ("max_steps: 150", "max_steps: 0", "spec.yaml:16: max_steps: must be >= 1, got 0"),
        ("norm(fingertip - [0.45", "norm(fingertp - [0.45", "spec.yaml:14: starts_when: unknown name 'fingertp' at column 6"),
    ],
)
def test_messages_name_the_field_once_and_the_rule(old: str, new: str, expected: str) -> None:
    assert old in GOOD
    with pytest.raises(InvalidSpecError) as info:
        parse_spec_text(GOOD.replace(old, new, 1), "spec.yaml")
    lines = info.value.lines()
    assert any(expected in line for line in lines), lines
    for line in lines:
        field = line.split(": ")[1]
        assert f"{field}: {field}:" not in line


def test_a_good_spec_still_passes() -> None:
    assert parse_spec_text(GOOD, "spec.yaml").name == "arm-lift"


def test_several_files_are_registered_one_by_one(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text(GOOD.replace("name: arm-lift", "name: arm-bad").replace("exploration_std: 0.2", "exploration_std: 0.0"))
    good = ROOT / "configs" / "skills" / "arm-place.yaml"
    store = str(tmp_path / "store")
    assert main(["register", str(good), str(bad), "--store", store, "--json"]) == 2
    out = json.loads(capsys.readouterr().out)
    assert [v["ref"] for v in out["versions"]] == ["arm-place@1"] and out["refused"] == [str(bad)]
    assert main(["register", str(good), str(bad), "--store", store]) == 2
    err = capsys.readouterr().err
    assert f"registered 1 of 2 files; not stored: {bad}" in err
    assert main(["list", "--store", store, "--json"]) == 0
    names = [row["name"] for row in json.loads(capsys.readouterr().out)["skills"]]
    assert names == ["arm-place"]  # the good file was stored, the bad one was not


def test_one_bad_file_alone_has_no_summary_line(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text(GOOD.replace("exploration_std: 0.2", "exploration_std: 0.0"))
    assert main(["register", str(bad), "--store", str(tmp_path / "s")]) == 2
    assert "files; not stored" not in capsys.readouterr().err
