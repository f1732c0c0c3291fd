"""kinetome.trainers: option-model fitting and the option actor-critic trainer."""

import os as _os

# MKL (torch's BLAS here) may pick code paths by memory alignment, so the same
# product can differ in the last bit between runs; strict conditional numerical
# reproducibility keeps training and resumed training bit for bit. It must be set
# before torch loads MKL.
_os.environ.setdefault("MKL_CBWR", "AUTO,STRICT")

__all__: list[str] = []

# --- option actor-critic trainer ---------------------------------------------
from .config import TrainConfig, TrainFile, TrainTask, load_train_config, load_train_file, load_train_task  # noqa: E402
from .evaluate import SkillMetrics, evaluate_skill  # noqa: E402
from .option_critic import OptionCriticTrainer, StopTraining, TrainOutcome  # noqa: E402
from .retrain import RetrainResult, retrain_skill  # noqa: E402
from .train_set import TrainSetResult, train_skills  # noqa: E402
from .trainable import TrainableSkill, flat_skill, trainable_from_loaded  # noqa: E402

__all__ += [
    "TrainConfig",
    "TrainTask",
    "TrainFile",
    "load_train_file",
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
