"""README's promises: the two quick-start commands, and CI runs the test one verbatim."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [block.strip() for block in re.findall(r"```\n(.*?)```", section, flags=re.S)]


def test_quick_start_has_exactly_two_one_line_commands() -> None:
    commands = _quick_start_commands()
    assert len(commands) == 2, commands
    assert all("\n" not in c for c in commands)
    assert "kinetome demo" in commands[0]
    assert "pytest" in commands[1]


def test_ci_runs_readme_test_command_verbatim() -> None:
    test_command = _quick_start_commands()[1]
    ci_lines = [line.strip() for line in (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()]
    assert test_command in ci_lines


def test_top_level_layout_is_fixed() -> None:
    allowed = {"README.md", "DEVELOPERS.md", "pyproject.toml", "library", "trainers", "envs", "tests", "configs", "LICENSE"}
    import subprocess

    tracked = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout.split()
    top = {p.split("/", 1)[0] for p in tracked if not p.startswith(".")}
    assert top <= allowed, top - allowed
