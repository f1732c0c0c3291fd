"""One vocabulary: no old spelling in any command's --help, any --json output's keys or any shipped YAML file.

The old spellings of each renamed concept are listed here (DEVELOPERS.md, "Vocabulary
(settled names)", is the table they come from). Old spellings are allowed only in the
compatibility readers (library/renamed_keys.py, library/cli/old_spellings.py), which no
output here passes through: hidden old command and option names never show in --help.
"""

from __future__ import annotations

import argparse
import json
import re
from pathlib import Path
from typing import Any, Iterator

import pytest
import yaml

from kinetome.library.cli.main import build_parser, main

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"

# -- the old spellings, per renamed concept --------------------------------------------

# Patterns that must not appear in any --help text.
HELP_PATTERNS: dict[str, str] = {
    "register (was add)": r"\bkinetome add\b|^\s{4}add\s",
    "lineage (was history)": r"\bhistory\b",
    "--budget (was --steps)": r"--steps\b",
    "--initial-states (was --start)": r"--start\b",
    "--out (was --report, -o/--output)": r"--report\b|--output\b|(?<![\w-])-o\b",
    "initial states (was start distribution)": r"start[- ]distribution|start-state",
    "handoff/entry (was junction)": r"\bjunctions?\b",
    "env_ended (was env_terminated)": r"\benv_terminated\b",
    "duration (was MEAN STEPS)": r"MEAN STEPS",
    "controller.settings (was controller.options)": r"controller\.options",
    "current (was latest)": r"\blatest\b",
    "kinetome fit (was fit-models)": r"fit-models",
    "api.register (was register_skill)": r"register_skill",
}

# Keys that must not appear anywhere in a --json output (at any depth).
JSON_KEYS: dict[str, set[str]] = {
    "step is a unit, never a bare key": {"steps"},
    "duration (was episode_steps, mean_steps, length_mean)": {"episode_steps", "mean_steps", "length_mean"},
    "is_new / created_at (was created)": {"created"},
    "register (was added)": {"added"},
    "current (was latest)": {"latest"},
    "outcomes (was end_reasons, reasons)": {"end_reasons", "reasons"},
    "env_ended (was env_terminated, terminated)": {"env_terminated", "terminated"},
    "stop_rate (was termination_rate)": {"termination_rate"},
    "handoff/entry (was junction)": {"junction", "junctions", "junction_count"},
    "controller.settings (was options)": {"options"},
    "initial states (was start)": {"start"},
    "training-config keys": {
        "n_envs", "rollout_len", "epochs", "minibatch", "lr", "lr_schedule", "lam", "clip", "entropy_coef",
        "value_coef", "value_clip", "max_grad_norm", "target_kl", "normalise_advantages", "normalise_observations",
        "normalise_rewards", "termination", "termination_hidden", "termination_lr", "termination_init",
    },
}

# Keys (by name, at any depth) and dotted paths that must not appear in a shipped YAML file.
YAML_KEYS: set[str] = {"steps", "start", "junction", "options", *JSON_KEYS["training-config keys"]}
YAML_PATHS: set[str] = {"chain", "task.notes", "task.skills", "task.start"}  # `chain` as the file's name key


def _keys(data: Any, path: str = "") -> Iterator[tuple[str, str]]:
    """(key, dotted path) of every mapping key in ``data``, at any depth."""
    if isinstance(data, dict):
        for key, value in data.items():
            here = f"{path}.{key}" if path else str(key)
            yield str(key), here
            yield from _keys(value, here)
    elif isinstance(data, list):
        for item in data:
            yield from _keys(item, path)


def old_json_keys(data: Any, *, allowed: set[str] = frozenset()) -> list[str]:
    """Dotted paths in ``data`` whose key is an old spelling (empty: none)."""
    banned = set().union(*JSON_KEYS.values()) - set(allowed)
    return [path for key, path in _keys(data) if key in banned]


def old_help_words(text: str, *, allowed: set[str] = frozenset()) -> list[str]:
    """Concepts whose old spelling ``text`` uses."""
    return [concept for concept, pattern in HELP_PATTERNS.items() if concept not in allowed and re.search(pattern, text, flags=re.M)]


def old_yaml_keys(data: Any, *, allowed: set[str] = frozenset()) -> list[str]:
    """Dotted paths of old keys in a parsed YAML file."""
    found = []
    for key, path in _keys(data):
        if (key in YAML_KEYS - set(allowed)) or path in YAML_PATHS:
            found.append(path)
    return found


# -- the checks can fail ----------------------------------------------------------------


def test_learning_curve_columns_use_current_names() -> None:
    from kinetome.trainers.curves import CURVE_COLUMNS, curve_csv, current_curve_row

    assert old_json_keys(dict.fromkeys(CURVE_COLUMNS, 0)) == []
    assert {"env_steps", "learning_rate", "stop_rate", "mean_duration"} <= set(CURVE_COLUMNS)
    old = {"update": 1, "steps": 512, "lr": 3e-4, "termination_rate": 0.1, "length_mean": 40.0}  # a pre-rename checkpoint row
    row = current_curve_row(old)
    assert row == {"update": 1, "env_steps": 512, "learning_rate": 3e-4, "stop_rate": 0.1, "mean_duration": 40.0}
    header, values = curve_csv([row]).splitlines()
    assert dict(zip(header.split(","), values.split(",")))["env_steps"] == "512"
    assert old_json_keys(old) != []  # the check can fail


def test_each_check_finds_an_old_spelling_and_passes_the_new() -> None:
    assert old_json_keys({"env_steps": 1, "after": {"mean_duration": 2, "outcomes": {"env_ended": 0}}}) == []
    assert old_json_keys({"schema": "x", "after": {"mean_steps": 2, "reasons": {"terminated": 1}}, "config": {"n_envs": 8}}) == [
        "after.mean_steps", "after.reasons", "after.reasons.terminated", "config.n_envs",
    ]
    assert old_help_words("write the bundle to --out FILE; initial states from --initial-states") == []
    assert old_help_words("usage: kinetome export -o FILE\n  --start FILE  start distribution") == [
        "--initial-states (was --start)", "--out (was --report, -o/--output)", "initial states (was start distribution)",
    ]
    assert old_yaml_keys({"name": "c", "task": {"initial_states": "x"}, "skills": ["a"]}) == []
    assert old_yaml_keys({"chain": "c", "start": "x", "task": {"notes": "n"}, "steps": ["a"], "controller": {"options": {}}}) == [
        "chain", "start", "task.notes", "steps", "controller.options",
    ]
    assert old_yaml_keys({"name": "c", "require": {"handoff": 0.9, "chain": 0.9}}) == []  # require.chain is current


# -- --help of every command ----------------------------------------------------------


def _visible_commands(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    listed = {choice.dest for choice in action._choices_actions}  # hidden old names are not listed
    return {name: sub for name, sub in action.choices.items() if name in listed}


def test_every_help_text_uses_the_vocabulary() -> None:
    parser = build_parser()
    commands = _visible_commands(parser)
    assert {"register", "lineage", "run", "fit", "check", "retrain", "train", "export", "import"} <= set(commands)
    assert not {"add", "history"} & set(commands)
    problems = {"kinetome": old_help_words(parser.format_help())}
    for name, sub in commands.items():
        problems[name] = old_help_words(sub.format_help())
    assert {k: v for k, v in problems.items() if v} == {}


def test_every_option_and_positional_has_help() -> None:
    missing = []
    for name, sub in _visible_commands(build_parser()).items():
        for action in sub._actions:
            if action.help is None and not isinstance(action, argparse._HelpAction):
                missing.append(f"{name} {action.option_strings or action.dest}")
    assert missing == []


# -- keys of every shipped YAML file --------------------------------------------------


SHIPPED_YAML = sorted(CONFIGS.rglob("*.yaml"))


@pytest.mark.parametrize("path", SHIPPED_YAML, ids=[str(p.relative_to(CONFIGS)) for p in SHIPPED_YAML])
def test_shipped_yaml_uses_the_vocabulary(path: Path) -> None:
    data = yaml.safe_load(path.read_text(encoding="utf-8"))
    assert old_yaml_keys(data) == []


# -- keys of every --json output ------------------------------------------------------


@pytest.fixture(scope="module")
def json_outputs(tmp_path_factory) -> dict[str, Any]:
    """One --json output of every command that has one, on a small store."""
    tmp = tmp_path_factory.mktemp("vocab")
    store = str(tmp / "store")
    capsys = _Capture()
    out: dict[str, Any] = {}
    s = ["--store", store]
    with capsys:
        out["register"] = capsys.json(*s, "register", *map(str, sorted((CONFIGS / "skills").glob("*.yaml"))), "--json")
        out["run"] = capsys.json(*s, "run", "arm-lift", "--episodes", "4", "--json")
        out["fit"] = capsys.json(*s, "fit", "arm-lift", "--episodes", "20", "--json")
        out["retrain"] = capsys.json(
            *s, "retrain", "arm-reach-tray", "--variant", str(CONFIGS / "variants" / "heavy_payload.yaml"),
            "--initial-states", str(CONFIGS / "initial_states" / "arm_clearance.yaml"),
            "--config", str(CONFIGS / "training" / "demo_quick.yaml"), "--budget", "2048", "--out", str(tmp / "rt"), "--json",
        )
        train = tmp / "train.yaml"
        train.write_text((CONFIGS / "training" / "options_small.yaml").read_text().replace("env_step_budget: 32768", "env_step_budget: 2048"))
        out["train"] = capsys.json(*s, "train", str(train), "--out", str(tmp / "tr"), "--json")
        out["learn-initiation"] = capsys.json(*s, "learn-initiation", "arm-lift", "--episodes", "300", "--json")
        out["list"] = capsys.json(*s, "list", "--json")
        out["show"] = capsys.json(*s, "show", "arm-reach-tray@2", "--json")
        out["lineage"] = capsys.json(*s, "lineage", "arm-reach-tray", "--log", "--json")
        out["diff"] = capsys.json(*s, "diff", "arm-reach-tray@1", "arm-reach-tray@2", "--json")
        out["verify"] = capsys.json(*s, "verify", "--json")
        assert main([*s, "export", "arm-reach-tray@2", "--out", str(tmp / "b.tar.gz")]) == 0
        out["import"] = capsys.json("--store", str(tmp / "other"), "import", str(tmp / "b.tar.gz"), "--json")
        out["promote"] = capsys.json(*s, "promote", "arm-reach-tray@1", "--json")
        out["check"] = capsys.json(*s, "check", str(CONFIGS / "chains" / "arm-place-release.yaml"), "--episodes", "20", "--json")
        out["copy-store"] = capsys.json(*s, "copy-store", str(tmp / "copied"), "--json")
        out["store-settings"] = capsys.json(*s, "store-settings", "--json")
        out["sweep"] = capsys.json(*s, "sweep", "arm-reach-tray@1", "--axis", "payload_mass=0.2,1.0", "--episodes", "2", "--json")
        out["plan"] = capsys.json(*s, "plan", "--env", "kinetome/BenchArm-v0", "--goal", "norm(fingertip - target) < 0.02",
                                  "--max-length", "2", "--particles", "10", "--top", "1", "--episodes", "20", "--out", str(tmp / "pl"), "--json")
    return out


class _Capture:
    """stdout capture for a module-scoped fixture (pytest's capsys is function-scoped)."""

    def __enter__(self) -> "_Capture":
        import contextlib
        import io

        self._buffer = io.StringIO()
        self._redirect = contextlib.redirect_stdout(self._buffer)
        self._redirect.__enter__()
        return self

    def __exit__(self, *exc: object) -> None:
        self._redirect.__exit__(*exc)

    def json(self, *args: str) -> Any:
        start = self._buffer.tell()
        code = main(list(args))
        text = self._buffer.getvalue()[start:]
        assert code in (0, 1, 3), text  # check exits 1 (breaks) or 3 (unsure) with valid JSON
        return json.loads(text)


COMMANDS_WITH_JSON = ("register", "run", "fit", "retrain", "train", "list", "show", "lineage", "diff", "verify", "import", "promote", "check", "copy-store", "store-settings", "sweep", "plan",
                      "learn-initiation")


@pytest.mark.parametrize("command", COMMANDS_WITH_JSON)
def test_every_json_output_has_a_schema_and_the_vocabulary(json_outputs, command) -> None:
    data = json_outputs[command]
    assert isinstance(data, dict) and re.fullmatch(rf"kinetome\.{command}/\d+", data.get("schema", "")), data.get("schema")
    assert old_json_keys(data) == []


@pytest.mark.parametrize("command", ["run", "retrain", "train", "check", "sweep", "plan", "learn-initiation"])
def test_results_that_could_reach_a_machine_carry_the_caution(json_outputs, command) -> None:
    assert "ISO 12100" in json_outputs[command]["caution"]


def test_the_walk_covers_every_command_with_a_json_option() -> None:
    with_json = {name for name, sub in _visible_commands(build_parser()).items() if any("--json" in a.option_strings for a in sub._actions)}
    assert with_json == set(COMMANDS_WITH_JSON)
