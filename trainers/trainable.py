"""A skill as the trainer sees it: controller, predicates, timeout and which parameters it may move."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import torch

__all__ = ["TrainableSkill", "trainable_from_loaded", "flat_skill"]


@dataclass(eq=False)
class TrainableSkill:
    """One intra-option policy plus its initiation set and termination condition.

    ``starts_when``/``stops_when`` are parsed predicates (None: always / never);
    ``predicate_values`` are the parameter values they may name (no batch axis).
    ``frozen`` lists controller parameters held fixed during training: those
    the predicates name (moving a goal the stop test reads would let the
    trainer redefine success) plus any the caller adds. ``adapt_inputs`` lets
    the trainer set a controller's stored input normaliser (``input_mean``,
    ``input_std``, e.g. of the mlp kind) from running statistics of its inputs
    before each rollout; leave it off to keep a stored policy's normaliser.
    """

    name: str
    controller: Any  # kinetome.library.controllers.Controller
    max_steps: int
    starts_when: Any = None
    stops_when: Any = None
    predicate_values: Mapping[str, np.ndarray] = field(default_factory=dict)
    frozen: tuple[str, ...] = ()
    adapt_inputs: bool = False

    def __post_init__(self) -> None:
        if not isinstance(self.max_steps, int) or self.max_steps < 1:
            raise ValueError(f"skill {self.name}: max_steps must be a positive integer, got {self.max_steps!r}")
        named = set()
        for pred in (self.starts_when, self.stops_when):
            if pred is not None:
                named |= set(pred.names)
        params = set(_parameter_names(self.controller))
        self.frozen = tuple(sorted(set(self.frozen) | (named & params)))

    @property
    def reads(self) -> tuple[str, ...]:
        """Named-state inputs of the controller."""
        return tuple(getattr(self.controller, "inputs", ()))

    @property
    def needs(self) -> tuple[str, ...]:
        """Runtime extras (``<site>_jac``) the controller requires."""
        return tuple(getattr(self.controller, "needs", ()) or ())

    @property
    def input_normaliser(self) -> tuple[Any, Any] | None:
        """The controller's (input_mean, input_std) buffers when it has them and may adapt them."""
        fixed = getattr(self.controller, "fixed", None)
        if not self.adapt_inputs or fixed is None:
            return None
        mean, std = getattr(fixed, "input_mean", None), getattr(fixed, "input_std", None)
        return None if mean is None or std is None else (mean, std)

    def starts(self, state: Mapping[str, np.ndarray]) -> np.ndarray:
        n = _batch(state)
        if self.starts_when is None:
            return np.ones(n, dtype=bool)
        return np.asarray(self.starts_when.evaluate({**self.predicate_values, **state}), dtype=bool)

    def stops(self, state: Mapping[str, np.ndarray]) -> np.ndarray:
        n = _batch(state)
        if self.stops_when is None:
            return np.zeros(n, dtype=bool)
        return np.asarray(self.stops_when.evaluate({**self.predicate_values, **state}), dtype=bool)

    def trainable_parameters(self) -> list[torch.nn.Parameter]:
        """The controller parameters the optimiser moves (frozen ones excluded)."""
        out = []
        for name, param in self.controller.named_parameters():
            if name.split(".")[-1] in self.frozen or not param.requires_grad:
                continue
            out.append(param)
        return out


def _parameter_names(controller: Any) -> list[str]:
    return [name.split(".")[-1] for name, _ in controller.named_parameters()]


def _batch(state: Mapping[str, np.ndarray]) -> int:
    for v in state.values():
        return int(np.shape(v)[0])
    return 0


def trainable_from_loaded(skill: Any, *, frozen: tuple[str, ...] = ()) -> TrainableSkill:
    """Wrap a runtime ``LoadedSkill`` (its controller is trained in place)."""
    return TrainableSkill(
        name=skill.ref,
        controller=skill.controller,
        max_steps=int(skill.max_steps),
        starts_when=skill.starts_when,
        stops_when=skill.stops_when,
        predicate_values=dict(skill.parameters),
        frozen=frozen,
    )


def flat_skill(controller: Any, *, max_steps: int, name: str = "policy", adapt_inputs: bool = True) -> TrainableSkill:
    """A bare controller as the only skill: it may start anywhere and never stops by itself."""
    return TrainableSkill(name=name, controller=controller, max_steps=max_steps, adapt_inputs=adapt_inputs)
