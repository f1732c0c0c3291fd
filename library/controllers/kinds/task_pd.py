"""Declaration of the ``task_pd`` kind: its settings and parameters, without torch
(the torch implementation is ``controllers/task_pd.py``)."""

from __future__ import annotations

from typing import Any, Mapping

from ...errors import Problem
from ..context import ControllerContext
from ..errors import close_match_hint, problem
from ..kind import ControllerKind
from ..params import ParamDecl
from ..registry import declares_kind
from .joint_pd import PER_ACTUATOR, bias_decl

__all__ = ["TaskPDKind", "TASK_KP_MAX", "TASK_KD_MAX", "JOINT_DAMPING_MAX", "WORKSPACE_FALLBACK"]

TASK_KP_MAX = 1.0e4  # ctrl per m
TASK_KD_MAX = 1.0e3  # ctrl s per m
JOINT_DAMPING_MAX = 100.0
WORKSPACE_FALLBACK = 10.0  # m, target bounds when the layout gives no envelope for the site
PER_AXIS = "give three values, one per world axis (x, y, z)"


@declares_kind("task_pd")
class TaskPDKind(ControllerKind):
    """Pull a site (the fingertip by default) toward a Cartesian target.

    A virtual spring-damper in world coordinates, f = kp (setpoint - x) - kd xdot,
    is mapped to joint efforts through the site's Jacobian transpose,
    u = J_act^T f - joint_damping qdot + bias, where J_act keeps the Jacobian's
    columns of the actuated dofs. Use it for reaching, pointing and pushing when
    the goal is a position in space rather than a posture. It reads
    ``<site>``, ``<site>_vel`` and ``qvel``, and needs ``<site>_jac`` (B, 3, nv)
    from the runtime (MuJoCo's ``mj_jacSite``).
    """

    SETTINGS = {"site": "fingertip"}
    @classmethod
    def _normalise_settings(
        cls, context: ControllerContext, settings: dict[str, Any], where: str, problems: list[Problem]
    ) -> dict[str, Any]:
        site = settings["site"]
        field = f"{where}.settings.site"
        layout = context.layout
        candidates = [q.name for q in layout if q.shape == (3,) and f"{q.name}_vel" in layout]
        if not isinstance(site, str) or site not in layout:
            problems.append(problem(
                field,
                f"must name a 3-vector quantity of the state, got {site!r}",
                f"{close_match_hint(site, candidates)}quantities with a velocity: {', '.join(candidates) or 'none'}",
            ))
            return settings
        if layout[site].shape != (3,):
            problems.append(problem(field, f"must name a quantity of shape (3,), got {site!r} of shape {layout[site].shape}",
                                    f"quantities with a velocity: {', '.join(candidates) or 'none'}"))
        if f"{site}_vel" not in layout:
            problems.append(problem(field, f"needs the velocity quantity '{site}_vel', which the state does not have",
                                    f"quantities with a velocity: {', '.join(candidates) or 'none'}"))
        if "qvel" not in layout:
            problems.append(problem(field, "needs 'qvel' in the state for joint damping", "use an env whose state has qvel"))
        if context.jacobians is not None and site not in context.jacobians:
            problems.append(problem(field, f"needs the Jacobian '{site}_jac', which the env cannot supply",
                                    f"Jacobians available: {', '.join(context.jacobians) or 'none'}"))
        return settings

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        n = context.n_act
        low, high = context.envelope((settings["site"],), WORKSPACE_FALLBACK)
        return (
            ParamDecl("setpoint", (3,), low, high, None, f"world position the {settings['site']} is pulled to", "m",
                      shape_help=PER_AXIS),
            ParamDecl("kp", (3,), 0.0, TASK_KP_MAX, None, "task-space stiffness per world axis", "ctrl/m",
                      limit_low=0.0, shape_help=PER_AXIS),
            ParamDecl("kd", (3,), 0.0, TASK_KD_MAX, 0.0, "task-space damping per world axis", "ctrl s/m",
                      limit_low=0.0, shape_help=PER_AXIS),
            ParamDecl("joint_damping", (n,), 0.0, JOINT_DAMPING_MAX, 0.0, "damping per actuated joint", "ctrl s/rad",
                      limit_low=0.0, shape_help=PER_ACTUATOR),
            bias_decl(context),
        )

    @classmethod
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        site = settings["site"]
        return (site, f"{site}_vel", "qvel")

    @classmethod
    def requires(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        return (f"{settings['site']}_jac",)
