"""Spec, training, variant and initial-states files in the wave-1 format (tests/fixtures/wave1) still load."""

from __future__ import annotations

import warnings
from pathlib import Path

from kinetome.library.renamed_keys import RenamedKeyWarning

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "wave1"


def _loaded_with_warnings(load, path):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        value = load(path)
    return value, [str(w.message) for w in caught if w.category is RenamedKeyWarning]


def test_old_spec_loads_with_one_warning() -> None:
    from kinetome.library.spec_load import load_spec

    skill, messages = _loaded_with_warnings(load_spec, FIXTURES / "spec_old.yaml")
    assert skill.controller.settings["hidden"] == [8]
    assert messages == [f"{FIXTURES / 'spec_old.yaml'}:7: 'controller.options' is an old spelling; write 'controller.settings' instead"]


def test_old_training_file_loads(tmp_path) -> None:
    from kinetome.trainers.config import load_train_file

    loaded, messages = _loaded_with_warnings(load_train_file, FIXTURES / "train_old.yaml")
    assert loaded.skills == ("arm-lift", "arm-reach-tray") and loaded.config.env_step_budget == 8192
    assert len(messages) == 22 and all("is an old spelling; write" in m for m in messages)


def test_old_variant_and_initial_states_files_load_silently() -> None:
    from kinetome.library.tasks import load_start_file, load_variant_file

    with warnings.catch_warnings():
        warnings.simplefilter("error", RenamedKeyWarning)  # nothing in them was renamed
        assert load_variant_file(FIXTURES / "variant_old.yaml").name == "heavy_payload"
        assert load_start_file(FIXTURES / "start_old.yaml").name == "arm_home"
