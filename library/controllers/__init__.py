"""Controller kinds: torch modules with named, bounded parameters and a Gaussian exploration head."""

import os as _os

# MKL (torch's BLAS here) may pick code paths by memory alignment, so the same
# product can differ in the last bit between runs; strict conditional numerical
# reproducibility keeps training and resumed training bit for bit. It must be set
# before torch loads MKL.
_os.environ.setdefault("MKL_CBWR", "AUTO,STRICT")

from .base import LOG_STD_HIGH, LOG_STD_LOW, Controller, log_std_decl
from .build import build_controller
from .check import check_controller
from .context import ControllerContext, context_from_rig
from .errors import ControllerError
from .params import ParamDecl, check_parameters, check_value, resolve_bounds
from .registry import controller_kinds, kind_class, register_kind
from .serialize import PARAMETERS_FORMAT, load_parameters, parameters_metadata, save_parameters

# Importing the kinds runs their @register_kind decorators.
from .cpg import OscillatorGait
from .joint_pd import JointPD
from .linear import LinearFeedback
from .mlp import MLPPolicy
from .task_pd import TaskPD

__all__ = [
    "Controller",
    "ControllerContext",
    "ControllerError",
    "ParamDecl",
    "LOG_STD_LOW",
    "LOG_STD_HIGH",
    "build_controller",
    "check_controller",
    "check_parameters",
    "check_value",
    "context_from_rig",
    "controller_kinds",
    "kind_class",
    "load_parameters",
    "log_std_decl",
    "parameters_metadata",
    "PARAMETERS_FORMAT",
    "register_kind",
    "resolve_bounds",
    "save_parameters",
    "JointPD",
    "TaskPD",
    "LinearFeedback",
    "MLPPolicy",
    "OscillatorGait",
]
