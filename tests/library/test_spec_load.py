"""Skill specs: every shipped spec validates; bad specs give every problem with FILE:LINE."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from kinetome.library.errors import InvalidSpecError
from kinetome.library.spec import skill_from_document, skill_to_document
from kinetome.library.spec_load import load_spec, parse_spec_text

SKILLS = sorted((Path(__file__).resolve().parents[2] / "configs" / "skills").glob("*.yaml"))

GOOD = """\
name: reach
env: kinetome/BenchArm-v0
controller:
  kind: joint_pd
  parameters:
    setpoint: [1.44, -1.51, -1.39]
    kp: [30, 20, 6]
    kd: [3, 2, 0.3]
starts_when: norm(qvel) < 0.5
stops_when: norm(fingertip - target) < 0.02
max_steps: 150
"""


@pytest.mark.parametrize("path", SKILLS, ids=lambda p: p.stem)
def test_shipped_specs_validate_and_round_trip(path: Path) -> None:
    skill = load_spec(path)
    assert skill_from_document(skill_to_document(skill)) == skill


def test_good_spec_parses() -> None:
    skill = parse_spec_text(GOOD, "reach.yaml")
    assert skill.controller.kind == "joint_pd" and skill.max_steps == 150


def _problems(text: str) -> list[str]:
    with pytest.raises(InvalidSpecError) as info:
        parse_spec_text(textwrap.dedent(text), "bad.yaml")
    return info.value.lines()


@pytest.mark.parametrize(
    "old, new, expected",
    [
        ("stops_when:", "stop_when:", "bad.yaml:10: stop_when: unknown field 'stop_when'; did you mean 'stops_when'?"),
        ("max_steps: 150", "max_steps: -3", "bad.yaml:11: max_steps: must be >= 1, got -3"),
        ("max_steps: 150", "max_steps: many", "bad.yaml:11: max_steps: must be of type integer, got 'many'"),
        ("kind: joint_pd", "kind: joint_pid", "bad.yaml:4: controller.kind: must be one of the known values, got 'joint_pid'; did you mean 'joint_pd'?"),
        ("name: reach", "name: Reach Tray", "bad.yaml:1: name: has an invalid form 'Reach Tray'"),
        ("env: kinetome/BenchArm-v0", "env: kinetome/BenchArm-v9", "bad.yaml:2: env: unknown env 'kinetome/BenchArm-v9'; did you mean 'kinetome/BenchArm-v0'?"),
        ("norm(fingertip - target)", "norm(fingertp - target)", "bad.yaml:10: stops_when: unknown name 'fingertp'"),
        ("norm(qvel) < 0.5", "qvel.sum() < 0.5", "bad.yaml:9: starts_when: "),
        ("kp: [30, 20, 6]", "kp: [30, 20]", "bad.yaml:7: controller.parameters.kp: must have shape (3,), got (2,)"),
        ("kp: [30, 20, 6]", "kp: [30, 20, -6]", "bad.yaml:7: controller.parameters.kp:"),
        ("setpoint: [1.44, -1.51, -1.39]", "setpoint: [9.0, -1.51, -1.39]", "bad.yaml:6: controller.parameters.setpoint:"),
    ],
)
def test_bad_spec_lines(old: str, new: str, expected: str) -> None:
    assert old in GOOD
    lines = _problems(GOOD.replace(old, new))
    assert any(line.startswith(expected) for line in lines), lines


def test_every_problem_is_reported_at_once() -> None:
    text = GOOD.replace("stops_when:", "stop_when:").replace("max_steps: 150", "max_steps: 0").replace("name: reach\n", "name: reach\ncolour: red\n")
    lines = _problems(text)
    assert len(lines) == 4, lines  # colour, stop_when, missing stops_when, max_steps
    assert all(line.startswith("bad.yaml:") for line in lines)


@pytest.mark.parametrize("text, expected", [("[1, 2]\n", "a skill spec must be a YAML mapping"), ("name: [\n", "not valid YAML")])
def test_not_a_mapping_or_not_yaml(text: str, expected: str) -> None:
    assert expected in _problems(text)[0]


def test_schema_and_semantic_problems_come_together() -> None:
    text = GOOD.replace("stops_when:", "stop_when:").replace("kp: [30, 20, 6]", "kp: [30, 20]").replace("norm(qvel) < 0.5", "norm(qvl) < 0.5")
    lines = _problems(text)
    assert any("controller.parameters.kp: must have shape (3,)" in l for l in lines)
    assert any("unknown field 'stop_when'" in l for l in lines)
    assert any("starts_when" in l and "unknown name 'qvl'" in l for l in lines)
