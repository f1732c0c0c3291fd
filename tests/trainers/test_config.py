"""TrainConfig validation and the training YAML files (line-numbered errors)."""

from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.trainers.config import TrainConfig, config_from_mapping, load_train_config, load_train_task

CONFIGS = Path(__file__).resolve().parents[2] / "configs" / "training"


@pytest.mark.parametrize("name", ["arm_heavy_payload", "walker_low_friction", "demo_quick", "options_small"])
def test_shipped_training_files_load(name):
    path = CONFIGS / f"{name}.yaml"
    cfg = load_train_config(path)
    task = load_train_task(path)
    assert isinstance(cfg, TrainConfig) and task is not None and task.skills and task.env
    if task.variant is not None:
        assert Path(task.variant).exists(), task.variant


def test_demo_budget_is_small():
    cfg = load_train_config(CONFIGS / "demo_quick.yaml")
    assert cfg.steps <= 65_536 and cfg.updates <= 32


def test_derived_counts():
    cfg = TrainConfig(steps=1000, n_envs=4, rollout_len=100)
    assert cfg.batch_size == 400 and cfg.updates == 3
    assert cfg.as_dict()["critic_hidden"] == [64, 64]


def _write(tmp_path, text):
    p = tmp_path / "t.yaml"
    p.write_text(text)
    return p


@pytest.mark.parametrize(
    "text, line, field, message",
    [
        ("steps: 10\nepoch: 3\n", 2, "epoch", "unknown training setting; did you mean 'epochs'?"),
        ("steps: 10\nn_envs: 0\n", 2, "n_envs", "n_envs must be a positive integer, got 0"),
        ("gamma: 1.5\n", 1, "gamma", "gamma must lie in [0, 1], got 1.5"),
        ("lr: 0\n", 1, "lr", "lr must lie in (0, 1], got 0.0"),
        ("termination: sometimes\n", 1, "termination", "termination must be one of registered, hard, confined, learned"),
        ("critic_hidden: [64, -1]\n", 1, "critic_hidden", "critic_hidden must be a list of positive layer widths"),
        ("normalise_rewards: yes please\n", 1, "normalise_rewards", "must be true or false"),
        ("clip: abc\n", 1, "clip", "clip must be a finite number"),
        ("deliberation_cost: -0.1\n", 1, "deliberation_cost", "deliberation_cost must lie in [0, inf]"),
        ("lr_schedule: cosine\n", 1, "lr_schedule", "lr_schedule must be constant or linear"),
    ],
)
def test_bad_settings_report_file_line_and_field(tmp_path, text, line, field, message):
    path = _write(tmp_path, text)
    with pytest.raises(InvalidInputError) as info:
        load_train_config(path)
    problems = info.value.problems
    assert len(problems) == 1
    p = problems[0]
    assert (p.source, p.line, p.field) == (str(path), line, field)
    assert message in p.message + "; " + p.fix


def test_every_problem_is_reported_at_once(tmp_path):
    path = _write(tmp_path, "n_envs: -1\nepochs: 0\nbogus: 1\n")
    with pytest.raises(InvalidInputError) as info:
        load_train_config(path)
    assert [p.line for p in info.value.problems] == [1, 2, 3]


@pytest.mark.parametrize(
    "text, message",
    [
        ("- 1\n- 2\n", "must be a mapping of settings, got list"),
        ("steps: [\n", "not valid YAML"),
        ("task: 3\n", "must be a mapping"),
        ("task:\n  skils: [a]\n", "unknown task setting"),
        ("task:\n  skills: [1]\n", "task.skills must be a list"),
    ],
)
def test_bad_files(tmp_path, text, message):
    path = _write(tmp_path, text)
    with pytest.raises(InvalidInputError, match=message.replace("[", r"\[")):
        load_train_config(path)
        load_train_task(path)


def test_yaml_tags_are_refused(tmp_path):
    path = _write(tmp_path, "steps: !!python/object/apply:os.system ['true']\n")
    with pytest.raises(InvalidInputError):
        load_train_config(path)


def test_missing_file(tmp_path):
    with pytest.raises(InvalidInputError, match="file not found"):
        load_train_config(tmp_path / "nope.yaml")


def test_mapping_and_replace_validate():
    cfg = config_from_mapping({"steps": 100, "critic_hidden": [8]})
    assert cfg.critic_hidden == (8,)
    import dataclasses

    with pytest.raises(ValueError, match="epochs must be a positive integer"):
        dataclasses.replace(cfg, epochs=0)
