"""A spec's usual initial states: read from a file beside the spec or inline, checked on the env,
stored inside the version, and used by run, fit and retrain when no --initial-states is given."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from kinetome.library.api import open_store, register, run
from kinetome.library.errors import InvalidSpecError
from kinetome.library.spec import skill_from_document, skill_to_document
from kinetome.library.spec_load import load_spec, parse_spec_text

ROOT = Path(__file__).resolve().parents[2]
PLACE = ROOT / "configs" / "skills" / "arm-place.yaml"
AT_TRAY = ROOT / "configs" / "initial_states" / "arm_at_tray.yaml"


def _without_field(text: str) -> str:
    return "\n".join(line for line in text.splitlines() if not line.startswith("initial_states:")) + "\n"


def test_file_field_is_read_relative_to_the_spec_and_stored_inline() -> None:
    skill = load_spec(PLACE)
    mapping = skill.initial_states_mapping()
    assert mapping is not None and mapping.get("name") == "arm_at_tray"
    doc = skill_to_document(skill)
    assert doc["initial_states"] == mapping  # the version holds the content, not the path
    assert skill_from_document(json.loads(json.dumps(doc))) == skill


def test_inline_mapping_gives_the_same_skill_as_the_file(tmp_path: Path) -> None:
    import yaml

    inline = yaml.safe_load(AT_TRAY.read_text())
    text = _without_field(PLACE.read_text()) + "initial_states: " + json.dumps(inline) + "\n"
    assert parse_spec_text(text, "inline.yaml") == load_spec(PLACE)


def test_specs_without_the_field_keep_their_stored_content() -> None:
    skill = load_spec(ROOT / "configs" / "skills" / "arm-lift.yaml")
    assert skill.initial_states is None and "initial_states" not in skill_to_document(skill)


@pytest.mark.parametrize(
    "value, message",
    [
        ("missing.yaml", "initial_states: cannot use missing.yaml"),
        ("{name: x, nominal: {pose: no_such_keyframe}}", "initial_states: cannot draw a state on kinetome/BenchArm-v0"),
        ("{name: x, nominal: {qpos: [0.1, 0.2]}}", "initial_states: cannot draw a state on kinetome/BenchArm-v0"),
        ("{name: x, pose: tray}", "initial_states: pose: unknown field; did you mean 'noise'?"),
        ("[1, 2]", "initial_states: must be of type"),
    ],
)
def test_bad_initial_states_are_refused_at_the_field(tmp_path: Path, value: str, message: str) -> None:
    spec = tmp_path / "spec.yaml"
    spec.write_text(_without_field(PLACE.read_text()) + f"initial_states: {value}\n")
    with pytest.raises(InvalidSpecError) as info:
        load_spec(spec)
    assert any(message in line and line.startswith(f"{spec}:") for line in info.value.lines()), info.value.lines()


def test_run_uses_the_skills_own_initial_states_and_the_command_line_wins(tmp_path: Path) -> None:
    store = open_store(tmp_path / "store")
    register(PLACE, store=store)
    own = run("arm-place", store=store, episodes=20, seed=0)
    assert own["successes"] == 20  # from the tray: every episode starts and settles
    home = run("arm-place", store=store, episodes=20, seed=0, initial_states=ROOT / "configs/initial_states/arm_home.yaml")
    assert home["successes"] == 0  # from home the initiation set refuses every episode
    bare = tmp_path / "bare.yaml"
    bare.write_text(_without_field(PLACE.read_text()).replace("name: arm-place", "name: arm-place-bare"))
    register(bare, store=store)
    assert run("arm-place-bare", store=store, episodes=20, seed=0)["successes"] == 0  # the env's default start
