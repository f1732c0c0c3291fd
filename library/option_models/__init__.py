"""Option models of a skill (duration, reward, end state), their files, and chain prediction.

Pure numpy: nothing here imports torch, mujoco, z3, the store or the CLI.
Fitting from rollouts lives in ``kinetome.trainers.fitting``.
"""

from .bundle import ModelsMeta, OptionModels, OUTCOME_KEYS
from .chain import ChainPrediction, Estimate, HandoffPrediction, predict_chain
from .duration import DURATION_OUTPUTS, OUTCOME_CODES, DurationModel
from .end_state import END_STATE_OUTCOMES, EndStateModel, conformal_offsets, envelope_arrays
from .features import EXPANSIONS, FeatureMap, component_names, default_quantities, flatten_states, unflatten_states
from .heads import LinearHead, SoftmaxHead
from .metrics import classification_errors, interval_coverage, regression_errors
from .reward import REWARD_OUTPUTS, RewardModel
from .support import SUPPORT_EPS, HeldOutEpisodes, SupportModel, fit_support

__all__ = [
    "SupportModel",
    "HeldOutEpisodes",
    "fit_support",
    "SUPPORT_EPS",
    "OptionModels",
    "ModelsMeta",
    "OUTCOME_KEYS",
    "DurationModel",
    "DURATION_OUTPUTS",
    "OUTCOME_CODES",
    "RewardModel",
    "REWARD_OUTPUTS",
    "EndStateModel",
    "END_STATE_OUTCOMES",
    "envelope_arrays",
    "conformal_offsets",
    "FeatureMap",
    "EXPANSIONS",
    "component_names",
    "default_quantities",
    "flatten_states",
    "unflatten_states",
    "LinearHead",
    "SoftmaxHead",
    "regression_errors",
    "classification_errors",
    "interval_coverage",
    "predict_chain",
    "ChainPrediction",
    "HandoffPrediction",
    "Estimate",
]
