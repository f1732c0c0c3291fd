"""Chain checker: static (SMT), model and simulation methods, verdict per handoff.

Entry point: ``check_chain(path_or_chain, store=..., method="auto", ...) -> CheckResult``;
``result.exit_code`` is 0 (every handoff composes and the whole chain meets its
requirement), 1 (something breaks or fails), 3 (unsure); bad input raises
InvalidInputError (exit code 2). ``result.to_dict()`` is a JSON-ready value.
Methods register with ``@checker_method(name, cost=...)``.
"""

from .chain import CHAIN_FIELDS, Chain, load_chain, parse_chain_text
from .chain_stats import ChainStats, SkillTiming
from .check import check_chain, run_check
from .decision import Decision, bonferroni_confidence, decide
from .context import CheckContext, CheckOptions, prepare_context
from .envelope import Envelope, physical_envelope
from .evidence import Counterexample, Evidence, Handoff
from .registry import AUTO, checker_method, get_method, method_names, methods
from .result import SCHEMA, CheckResult, HandoffResult
from .sequential import SimPlan, Stage, auto_plan, fixed_plan, run_plan
from .trials import TRAJECTORY_TOLERANCE, Trials, trials_from_rollout
from .stats import (
    clopper_pearson,
    episodes_for_zero_failures,
    episodes_to_decide,
    lower_bound,
    upper_bound,
    zero_failure_bound,
)
from .verdict import Estimate, Verdict, estimate, exit_code_for, single_start_estimate

__all__ = [
    "check_chain",
    "run_check",
    "Chain",
    "CHAIN_FIELDS",
    "load_chain",
    "parse_chain_text",
    "CheckOptions",
    "CheckContext",
    "prepare_context",
    "CheckResult",
    "HandoffResult",
    "SCHEMA",
    "Decision",
    "decide",
    "bonferroni_confidence",
    "SimPlan",
    "Stage",
    "auto_plan",
    "fixed_plan",
    "run_plan",
    "Trials",
    "trials_from_rollout",
    "TRAJECTORY_TOLERANCE",
    "single_start_estimate",
    "ChainStats",
    "SkillTiming",
    "Handoff",
    "Evidence",
    "Counterexample",
    "Envelope",
    "physical_envelope",
    "checker_method",
    "get_method",
    "methods",
    "method_names",
    "AUTO",
    "Verdict",
    "Estimate",
    "estimate",
    "exit_code_for",
    "clopper_pearson",
    "lower_bound",
    "upper_bound",
    "zero_failure_bound",
    "episodes_for_zero_failures",
    "episodes_to_decide",
]
