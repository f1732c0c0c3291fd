"""Controller kinds: torch modules with named, bounded parameters and a Gaussian exploration head.

Importing this package does not import torch: the declarations, the plan
(``plan_controller``) and parameter files are torch-free; the torch names
(``Controller``, ``build_controller``, ``check_controller``, the kind classes)
load on first access.
"""

import os as _os

# MKL (torch's BLAS here) may pick code paths by memory alignment, so the same
# product can differ in the last bit between runs; strict conditional numerical
# reproducibility keeps training and resumed training bit for bit. It must be set
# before torch loads MKL.
_os.environ.setdefault("MKL_CBWR", "AUTO,STRICT")

import importlib as _importlib

from .context import ControllerContext, context_from_rig
from .errors import ControllerError
from .kind import LOG_STD_HIGH, LOG_STD_LOW, ControllerKind, log_std_decl
from .params import ParamDecl, check_parameters, check_value, resolve_bounds
from .plan import ControllerPlan, build_controller, plan_controller
from .registry import controller_kinds, kind_class, kind_declaration, register_kind
from .serialize import PARAMETERS_FORMAT, load_parameters, parameters_bytes, parameters_metadata, save_parameters

# name -> module of the torch-backed names, imported on first access.
_LAZY = {
    "Controller": "base",
    "check_controller": "check",
    "JointPD": "joint_pd",
    "TaskPD": "task_pd",
    "LinearFeedback": "linear",
    "MLPPolicy": "mlp",
    "OscillatorGait": "cpg",
}


def __getattr__(name: str):
    if name in _LAZY:
        return getattr(_importlib.import_module(f"{__name__}.{_LAZY[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "Controller",
    "ControllerContext",
    "ControllerKind",
    "ControllerPlan",
    "ControllerError",
    "ParamDecl",
    "LOG_STD_LOW",
    "LOG_STD_HIGH",
    "build_controller",
    "plan_controller",
    "kind_declaration",
    "parameters_bytes",
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
