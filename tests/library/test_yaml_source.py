"""YAML reading keeps line numbers for every field and reports syntax errors with their line."""

from __future__ import annotations

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.yaml_source import field_lines, field_path, load_yaml_file, load_yaml_text, unknown_keys


def test_lines_of_nested_fields() -> None:
    doc = load_yaml_text("name: a\ncontroller:\n  kind: joint_pd\n  parameters:\n    kp: [1, 2]\n")
    assert doc.line(("controller", "kind")) == 3
    assert doc.line(("controller", "parameters", "kp")) == 5
    assert doc.line(("controller", "parameters", "kp", 1)) == 5
    assert doc.line(("controller", "missing")) == 2  # nearest enclosing field


def test_field_path_format() -> None:
    assert field_path(("controller", "parameters", "kp", 1)) == "controller.parameters.kp[1]"


def test_field_lines_and_unknown_keys_as_chain_and_sweep_files_use_them() -> None:
    doc = load_yaml_text("name: a\nskills:\n  - arm-lift\n  - {skill: arm-place, may_time_ot: true}\n")
    assert field_lines(doc) == {"name": 1, "skills": 2, "skills[0]": 3, "skills[1]": 4, "skills[1].skill": 4, "skills[1].may_time_ot": 4}
    (problem,) = unknown_keys(doc, doc.data["skills"][1], ("skills", 1), ("skill", "may_time_out"))
    assert (problem.line, problem.field) == (4, "skills[1].may_time_ot")
    assert "did you mean 'may_time_out'?" in problem.fix and "valid fields of skills.1: skill, may_time_out" in problem.fix
    assert unknown_keys(doc, doc.data, (), ("name", "skills")) == []  # every key known: no problem


@pytest.mark.parametrize(
    "text, line",
    [("a: [1,\n", 2), ("a: 1\n  b: 2\n", 2), ("a: !!python/object:os.system x\n", 1)],
)
def test_syntax_and_unsafe_tags_are_clean_errors(text: str, line: int) -> None:
    with pytest.raises(InvalidInputError) as info:
        load_yaml_text(text, "spec.yaml")
    assert info.value.lines()[0].startswith(f"spec.yaml:{line}:")


def test_missing_file(tmp_path) -> None:
    with pytest.raises(InvalidInputError, match="file not found"):
        load_yaml_file(tmp_path / "nope.yaml")
