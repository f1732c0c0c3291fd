"""The compatibility reader: old keys move to their new spelling with one warning each."""

from __future__ import annotations

import warnings

import pytest

from kinetome.library.cli.main import main
from kinetome.library.errors import InvalidInputError
from kinetome.library.renamed_keys import Renamed, RenamedKeyWarning, rename_document, rename_keys
from kinetome.library.yaml_source import load_yaml_text


def _renamed(data, renames, lines=None):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = rename_keys(data, renames, source="f.yaml", lines=lines)
    return out, [str(w.message) for w in caught if w.category is RenamedKeyWarning]


def test_current_spellings_pass_unchanged_and_silently() -> None:
    data = {"env_step_budget": 10, "task": {"env": "e"}}
    (out, lines), messages = _renamed(data, {"steps": "env_step_budget", "task.start": "task.initial_states"})
    assert out == data and out is data and messages == []


def test_values_move_between_levels_with_their_lines() -> None:
    doc = load_yaml_text("chain: c\nstart: s.yaml\ntask:\n  notes: hello\n", "f.yaml")
    renames = {"chain": "name", "start": "task.initial_states", "task.notes": "description"}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        new = rename_document(doc, renames)
    assert new.data == {"name": "c", "task": {"initial_states": "s.yaml"}, "description": "hello"}
    assert doc.data["chain"] == "c", "the original document is not modified"
    assert new.line(("task", "initial_states")) == 2 and new.line(("description",)) == 4 and new.line(("name",)) == 1
    assert [str(w.message) for w in caught] == [
        "f.yaml:1: 'chain' is an old spelling; write 'name' instead",
        "f.yaml:2: 'start' is an old spelling; write 'task.initial_states' instead",
        "f.yaml:4: 'task.notes' is an old spelling; write 'description' instead",
    ]


def test_converted_values_and_changes_of_form() -> None:
    (out, _), messages = _renamed({"a": "3"}, [Renamed("a", "b", convert=int, hint="a whole number")], lines={("a",): 2})
    assert out == {"b": 3} and messages == ["f.yaml:2: 'a' is an old spelling; write 'b' instead (a whole number)"]
    scalar = Renamed("require", "require", convert=lambda p: {"handoff": p}, when=lambda v: not isinstance(v, dict), hint="write require: {handoff: P}")
    (out, _), messages = _renamed({"require": 0.9}, [scalar], lines={("require",): 7})
    assert out == {"require": {"handoff": 0.9}}
    assert messages == ["f.yaml:7: 'require' is written in an old form; write require: {handoff: P}"]
    (out, _), messages = _renamed({"require": {"chain": 0.5}}, [scalar])
    assert out == {"require": {"chain": 0.5}} and messages == []


def test_old_and_new_spelling_together_are_refused() -> None:
    with pytest.raises(InvalidInputError) as info:
        rename_keys({"steps": 1, "env_step_budget": 2}, {"steps": "env_step_budget"}, source="f.yaml", lines={("steps",): 3})
    assert str(info.value) == "f.yaml:3: steps: old spelling of 'env_step_budget', which is given too; keep only 'env_step_budget'"


def test_stored_data_reads_silently_and_non_mappings_pass() -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out, _ = rename_keys({"options": {}}, {"options": "settings"}, source="x", warn=False)
        assert out == {"settings": {}}
        assert rename_keys([1, 2], {"a": "b"}, source="x")[0] == [1, 2]


def test_bad_rename_tables_are_refused() -> None:
    with pytest.raises(ValueError, match="needs convert, when and hint"):
        Renamed("a", "a")
    with pytest.raises(ValueError, match="two dotted paths"):
        Renamed("", "a")


def test_cli_prints_old_spellings_as_one_warning_line(tmp_path, capsys) -> None:
    # a training file in the old format fails later (no store skills), but the warnings come first
    config = tmp_path / "t.yaml"
    config.write_text("task:\n  skills: [nothing-here]\nsteps: 64\n")
    code = main(["--store", str(tmp_path / "store"), "train", str(config)])
    err = capsys.readouterr().err.splitlines()
    assert code == 2
    assert f"kinetome: warning: {config}:2: 'task.skills' is an old spelling; write 'skills' instead" in err
    assert f"kinetome: warning: {config}:3: 'steps' is an old spelling; write 'env_step_budget' instead" in err
    assert sum("old spelling" in line for line in err) == 2
