"""TrainConfig validation and the training YAML files (line-numbered errors)."""

import warnings
from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.renamed_keys import RenamedKeyWarning
from kinetome.trainers.config import TRAIN_RENAMES, TrainConfig, config_from_mapping, config_from_stored, load_train_config, load_train_file, load_train_task

CONFIGS = Path(__file__).resolve().parents[2] / "configs" / "training"


@pytest.mark.parametrize("name", ["arm_heavy_payload", "walker_low_friction", "demo_quick", "options_small"])
def test_shipped_training_files_load(name):
    path = CONFIGS / f"{name}.yaml"
    with warnings.catch_warnings():
        warnings.simplefilter("error", RenamedKeyWarning)  # shipped files use the current spellings
        loaded = load_train_file(path)
    task = loaded.task
    assert isinstance(loaded.config, TrainConfig) and task is not None and loaded.skills and task.env
    if task.variant is not None:
        assert Path(task.variant).exists(), task.variant


def test_demo_budget_is_small():
    cfg = load_train_config(CONFIGS / "demo_quick.yaml")
    assert cfg.env_step_budget <= 65_536 and cfg.updates <= 32


def test_derived_counts():
    cfg = TrainConfig(env_step_budget=1000, parallel_envs=4, segment_steps=100)
    assert cfg.batch_size == 400 and cfg.updates == 3
    assert cfg.as_dict()["critic_hidden"] == [64, 64]


def _write(tmp_path, text):
    p = tmp_path / "t.yaml"
    p.write_text(text)
    return p


@pytest.mark.parametrize(
    "text, line, field, message",
    [
        ("env_step_budget: 10\nupdate_pass: 3\n", 2, "update_pass", "unknown training setting; did you mean 'update_passes'?"),
        ("env_step_budget: 10\nparallel_envs: 0\n", 2, "parallel_envs", "parallel_envs must be a positive integer, got 0"),
        ("gamma: 1.5\n", 1, "gamma", "gamma must lie in [0, 1], got 1.5"),
        ("lambda: -0.5\n", 1, "lambda", "lambda must lie in [0, 1], got -0.5"),
        ("learning_rate: 0\n", 1, "learning_rate", "learning_rate must lie in (0, 1], got 0.0"),
        ("stop_mode: sometimes\n", 1, "stop_mode", "stop_mode must be one of registered, hard, confined, learned"),
        ("critic_hidden: [64, -1]\n", 1, "critic_hidden", "critic_hidden must be a list of positive layer widths"),
        ("scale_rewards: yes please\n", 1, "scale_rewards", "must be true or false"),
        ("clip_ratio: abc\n", 1, "clip_ratio", "clip_ratio must be a finite number"),
        ("deliberation_cost: -0.1\n", 1, "deliberation_cost", "deliberation_cost must lie in [0, inf]"),
        ("learning_rate_schedule: cosine\n", 1, "learning_rate_schedule", "learning_rate_schedule must be constant or linear"),
        # an old spelling is read, then validated under its new name, at the line the user wrote
        ("seed: 1\nlr: 0\n", 2, "learning_rate", "learning_rate must lie in (0, 1], got 0.0"),
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
    path = _write(tmp_path, "parallel_envs: -1\nupdate_passes: 0\nbogus: 1\n")
    with pytest.raises(InvalidInputError) as info:
        load_train_config(path)
    assert [p.line for p in info.value.problems] == [1, 2, 3]


@pytest.mark.parametrize(
    "text, message",
    [
        ("- 1\n- 2\n", "must be a mapping of settings, got list"),
        ("env_step_budget: [\n", "not valid YAML"),
        ("task: 3\n", "must be a mapping"),
        ("task:\n  envv: a\n", "unknown task setting"),
        ("skills: [1]\n", "skills must be a list"),
        ("env_step_budget: 10\nsteps: 20\n", "old spelling of 'env_step_budget', which is given too"),
    ],
)
def test_bad_files(tmp_path, text, message):
    path = _write(tmp_path, text)
    with pytest.raises(InvalidInputError, match=message.replace("[", r"\[")):
        load_train_file(path)


def test_yaml_tags_are_refused(tmp_path):
    path = _write(tmp_path, "env_step_budget: !!python/object/apply:os.system ['true']\n")
    with pytest.raises(InvalidInputError):
        load_train_config(path)


def test_missing_file(tmp_path):
    with pytest.raises(InvalidInputError, match="file not found"):
        load_train_config(tmp_path / "nope.yaml")


def test_mapping_and_replace_validate():
    cfg = config_from_mapping({"env_step_budget": 100, "critic_hidden": [8], "lambda": 0.9})
    assert cfg.critic_hidden == (8,) and cfg.lambda_ == 0.9
    import dataclasses

    with pytest.raises(ValueError, match="update_passes must be a positive integer"):
        dataclasses.replace(cfg, update_passes=0)
    # the plain mapping reader takes current spellings only; old ones go through the file reader
    with pytest.raises(InvalidInputError, match="unknown training setting"):
        config_from_mapping({"steps": 100})


def test_as_dict_uses_file_spellings_and_round_trips():
    cfg = TrainConfig(lambda_=0.8, stop_hidden=(4,))
    data = cfg.as_dict()
    assert data["lambda"] == 0.8 and "lambda_" not in data and data["stop_hidden"] == [4]
    assert config_from_mapping(data) == cfg


def test_old_spellings_load_with_one_warning_each(tmp_path):
    # every old key of the wave-1 format, as written by the code at commit 00e2678
    old = Path(__file__).resolve().parents[1] / "fixtures" / "wave1" / "train_old.yaml"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        loaded = load_train_file(old)
    messages = [str(w.message) for w in caught if issubclass(w.category, RenamedKeyWarning)]
    present = [k for k in TRAIN_RENAMES if k.split(".")[-1] + ":" in old.read_text()]
    assert len(messages) == len(present) == 22
    for key in present:
        assert sum(f"'{key}' is an old spelling; write '{TRAIN_RENAMES[key]}' instead" in m for m in messages) == 1
    assert f"{old}:18: 'lam' is an old spelling; write 'lambda' instead" in messages
    cfg = loaded.config
    assert (cfg.env_step_budget, cfg.parallel_envs, cfg.segment_steps, cfg.update_passes, cfg.minibatch_size) == (8192, 8, 256, 2, 256)
    assert (cfg.learning_rate, cfg.learning_rate_schedule, cfg.policy_shift_limit, cfg.gradient_norm_cap) == (0.001, "linear", 0.05, 0.5)
    assert (cfg.lambda_, cfg.clip_ratio, cfg.critic_loss_weight, cfg.entropy_weight) == (0.95, 0.2, 0.5, 0.0)
    assert (cfg.standardise_advantages, cfg.scale_rewards, cfg.stop_mode, cfg.stop_hidden, cfg.stop_lr, cfg.stop_init_logit) == (True, False, "hard", (), 0.001, -2.0)
    assert loaded.skills == ("arm-lift", "arm-reach-tray")
    assert loaded.description.startswith("wave-1 fixture")
    assert loaded.task.initial_states == str(old.parent / "start_old.yaml")


def test_current_file_gives_no_warning(tmp_path):
    path = _write(tmp_path, "skills: [a]\ndescription: d\ntask: {env: kinetome/BenchArm-v0, initial_states: s.yaml}\nlambda: 0.9\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        loaded = load_train_file(path)
    assert loaded.config.lambda_ == 0.9 and loaded.task.initial_states == str(tmp_path / "s.yaml")


def test_stored_configs_with_old_spellings_read_silently():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cfg = config_from_stored({"steps": 64, "lam": 0.5, "termination": "hard"}, source="checkpoint")
    assert (cfg.env_step_budget, cfg.lambda_, cfg.stop_mode) == (64, 0.5, "hard")
