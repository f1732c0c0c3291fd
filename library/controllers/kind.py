"""What a controller kind declares, without torch: settings, parameters, inputs.

Validating a spec and storing its first version need only these declarations,
so ``kinetome register`` of a structured kind never imports torch. The torch
``Controller`` inherits them and adds the mean and the Gaussian head.
"""

from __future__ import annotations

from types import MappingProxyType
from typing import Any, ClassVar, Mapping

import numpy as np

from ..errors import Problem
from .context import ControllerContext
from .errors import ControllerError, close_match_hint, problem
from .params import ParamDecl

__all__ = ["ControllerKind", "log_std_decl", "LOG_STD_LOW", "LOG_STD_HIGH"]

# log_std bounds for an actuator of half-range 1 (common practice for Gaussian
# policies); wider actuators get the same range relative to their half-range too.
LOG_STD_LOW = -5.0
LOG_STD_HIGH = 1.0


def log_std_decl(context: ControllerContext) -> ParamDecl:
    """The exploration head's parameter, shared by every kind.

    Bounds are [-5, 1] widened to [-5 + log h, 1 + log h] for an actuator whose
    half-range h differs from 1; the default std is 10 % of the half-range.
    """
    log_half = np.log(context.action_half_range)
    low = LOG_STD_LOW + np.minimum(0.0, log_half)
    high = LOG_STD_HIGH + np.maximum(0.0, log_half)
    return ParamDecl(
        "log_std",
        (context.n_act,),
        low,
        high,
        default=np.log(0.1 * context.action_half_range),
        doc="log of the exploration noise's standard deviation, per actuator",
        unit="log ctrl",
        shape_help="give one value per actuator",
    )


class ControllerKind:
    """The declaration side of a controller kind: subclasses set ``SETTINGS`` and
    provide ``_declare`` and ``reads`` (and ``requires``, ``_normalise_settings``)."""

    kind: ClassVar[str] = ""
    SETTINGS: ClassVar[Mapping[str, Any]] = MappingProxyType({})

    @classmethod
    def resolve_settings(
        cls, context: ControllerContext, settings: Mapping[str, Any] | None = None, *, where: str = "controller"
    ) -> dict[str, Any]:
        """Settings with defaults filled in and values checked; raises ``ControllerError``."""
        given = dict(settings or {})
        problems: list[Problem] = []
        for name in given:
            if name not in cls.SETTINGS:
                known = ", ".join(sorted(cls.SETTINGS)) or "none"
                problems.append(problem(
                    f"{where}.settings.{name}",
                    f"is not a setting of kind {cls.kind!r}",
                    f"{close_match_hint(name, cls.SETTINGS)}known settings: {known}",
                ))
        merged = {**cls.SETTINGS, **{k: v for k, v in given.items() if k in cls.SETTINGS}}
        resolved = cls._normalise_settings(context, merged, where, problems)
        if problems:
            raise ControllerError(problems)
        return resolved

    @classmethod
    def _normalise_settings(
        cls, context: ControllerContext, settings: dict[str, Any], where: str, problems: list[Problem]
    ) -> dict[str, Any]:
        """Check setting values (append problems) and return them in canonical form."""
        return settings

    @classmethod
    def declare(cls, context: ControllerContext, settings: Mapping[str, Any] | None = None) -> tuple[ParamDecl, ...]:
        """Every parameter of this kind for ``context`` and ``settings``, ``log_std`` last."""
        resolved = cls.resolve_settings(context, settings)
        return (*cls._declare(context, resolved), log_std_decl(context))

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        raise NotImplementedError

    @classmethod
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        """Named-state quantities the mean reads."""
        raise NotImplementedError

    @classmethod
    def requires(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        """Runtime extras beyond named state (``<site>_jac``, (B, 3, nv))."""
        return ()
