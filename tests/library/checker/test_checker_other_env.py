"""A skill declared on another env of the chain's robot (walker-stand on TestWalkerStand-v0 in a
TestWalker-v0 chain) runs in the chain's env, and the check says so; a skill on the chain's own env gets no note."""

from __future__ import annotations

from checker_testkit import CONFIGS, write_chain

from kinetome.library.checker import check_chain

STAND = str(CONFIGS / "skills" / "walker-stand.yaml")  # env: kinetome/TestWalkerStand-v0
STANDING = str(CONFIGS / "initial_states" / "walker_standing.yaml")


def _notes(tmp_path, env):
    path = write_chain(tmp_path, "stand-only", [STAND], env=env, start=STANDING, episodes=5)
    result = check_chain(path, method="static")
    return result, [n for n in result.notes if "is declared on env" in n]


def test_skill_of_another_env_of_the_same_robot_is_noted(tmp_path):
    result, notes = _notes(tmp_path, "kinetome/TestWalker-v0")
    assert len(notes) == 1
    assert notes[0].startswith("walker-stand.yaml is declared on env kinetome/TestWalkerStand-v0 and runs here in env kinetome/TestWalker-v0")
    assert "the same robot, 'test_walker'" in notes[0]
    assert notes[0] in result.to_dict()["notes"]
    assert "is declared on env kinetome/TestWalkerStand-v0" in " ".join(result.format_text().split())


def test_skill_on_the_chain_env_gets_no_note(tmp_path):
    _, notes = _notes(tmp_path, "kinetome/TestWalkerStand-v0")
    assert notes == []
