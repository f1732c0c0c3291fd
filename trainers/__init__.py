"""kinetome.trainers: option-model fitting and the option actor-critic trainer."""

__all__: list[str] = []

# --- option actor-critic trainer ---------------------------------------------
from .config import TrainConfig, TrainTask, load_train_config, load_train_task  # noqa: E402
from .evaluate import SkillMetrics, evaluate_skill  # noqa: E402
from .option_critic import OptionCriticTrainer, StopTraining, TrainOutcome  # noqa: E402
from .retrain import RetrainResult, retrain_skill  # noqa: E402
from .train_set import TrainSetResult, train_skills  # noqa: E402
from .trainable import TrainableSkill, flat_skill, trainable_from_loaded  # noqa: E402

__all__ += [
    "TrainConfig",
    "TrainTask",
    "load_train_config",
    "load_train_task",
    "SkillMetrics",
    "evaluate_skill",
    "OptionCriticTrainer",
    "StopTraining",
    "TrainOutcome",
    "RetrainResult",
    "retrain_skill",
    "TrainSetResult",
    "train_skills",
    "TrainableSkill",
    "flat_skill",
    "trainable_from_loaded",
]
