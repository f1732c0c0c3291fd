"""The controller base class: named, bounded parameters, a deterministic mean and a Gaussian head."""

from __future__ import annotations

from types import MappingProxyType
from typing import Any, Mapping

import numpy as np
import torch

from ..errors import Problem
from .context import ControllerContext
from .errors import ControllerError, close_match_hint, problem
from .kind import LOG_STD_HIGH, LOG_STD_LOW, ControllerKind, log_std_decl
from .params import ParamDecl, check_value

__all__ = ["Controller", "log_std_decl", "LOG_STD_LOW", "LOG_STD_HIGH"]

_F64 = torch.float64


def _tensor(values: Any) -> torch.Tensor:
    """A float64 tensor holding its own copy of ``values`` (torch.tensor's values; about 6x cheaper on arrays)."""
    return torch.from_numpy(np.array(values, dtype=np.float64, copy=True))


class Controller(ControllerKind, torch.nn.Module):
    """A skill's internal policy: a deterministic mean plus Gaussian exploration.

    Subclasses register with ``@register_kind`` and provide the kind hooks of
    ``ControllerKind`` (``SETTINGS``, ``_declare``, ``reads``, optionally
    ``requires``; often by inheriting a torch-free declaration class) and
    ``_mean``. Build instances with ``build_controller``.

    Shapes: state values are (B, *quantity.shape), ``skill_time`` (B,) seconds
    since the skill started, actions (B, n_act). Everything is float64.
    """

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        raise NotImplementedError

    # ----- construction -----------------------------------------------------

    def __init__(
        self,
        context: ControllerContext,
        settings: Mapping[str, Any],
        decls: tuple[ParamDecl, ...],
        values: Mapping[str, np.ndarray],
        bounds: Mapping[str, tuple[np.ndarray, np.ndarray]],
    ):
        super().__init__()
        self.context = context
        self._settings = dict(settings)
        self.inputs: tuple[str, ...] = tuple(self.reads(context, self.settings))
        self.needs: tuple[str, ...] = tuple(self.requires(context, self.settings))
        self._decls: dict[str, ParamDecl] = {d.name: d for d in decls}
        self.p = torch.nn.ParameterDict()
        self.fixed = torch.nn.Module()
        self._low: dict[str, torch.Tensor] = {}
        self._high: dict[str, torch.Tensor] = {}
        for d in decls:
            tensor = torch.tensor(values[d.name], dtype=_F64)
            if d.trainable:
                self.p[d.name] = torch.nn.Parameter(tensor)
            else:
                self.fixed.register_buffer(d.name, tensor)
            low, high = bounds[d.name]
            self._low[d.name] = torch.tensor(low, dtype=_F64)
            self._high[d.name] = torch.tensor(high, dtype=_F64)
        self._action_low = torch.tensor(context.action_low, dtype=_F64)
        self._action_high = torch.tensor(context.action_high, dtype=_F64)
        self._qpos_index = torch.tensor(context.actuated_qpos, dtype=torch.long)
        self._qvel_index = torch.tensor(context.actuated_qvel, dtype=torch.long)
        self._shapes = {name: tuple(context.layout[name].shape) for name in self.inputs}
        self._shapes.update({name: (3, context.nv) for name in self.needs})

    # ----- parameters -------------------------------------------------------

    @property
    def settings(self) -> Mapping[str, Any]:
        """The resolved settings (defaults filled in), read-only."""
        return MappingProxyType(self._settings)

    @property
    def n_act(self) -> int:
        return self.context.n_act

    @property
    def log_std(self) -> torch.nn.Parameter:
        """(n_act,) log standard deviation of the exploration noise."""
        return self.p["log_std"]

    @property
    def declarations(self) -> tuple[ParamDecl, ...]:
        return tuple(self._decls.values())

    def value(self, name: str) -> torch.Tensor:
        """The live tensor of parameter ``name`` (a Parameter, or a buffer when not trainable)."""
        if name in self.p:
            return self.p[name]
        return getattr(self.fixed, name)

    def parameter_values(self) -> dict[str, np.ndarray]:
        """name -> float64 copy of every parameter (``log_std`` and fixed ones included)."""
        return {name: self.value(name).detach().cpu().numpy().copy() for name in self._decls}

    def parameter_bounds(self) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """name -> (low, high) full-shape float64 copies."""
        return {name: (self._low[name].numpy().copy(), self._high[name].numpy().copy()) for name in self._decls}

    def project_(self) -> "Controller":
        """Clamp every parameter into its bounds, in place (call after each optimiser step)."""
        with torch.no_grad():
            for name in self._decls:
                self.value(name).clamp_(self._low[name], self._high[name])
        return self

    def load_values(self, values: Mapping[str, Any], *, partial: bool = False, where: str = "controller") -> None:
        """Replace parameter values, e.g. from ``load_parameters``; all must be present unless ``partial``.

        Unknown or missing names, wrong shapes and out-of-bound values are all
        reported in one ``ControllerError``; nothing changes when any is wrong.
        """
        problems: list[Problem] = []
        known = list(self._decls)
        for name in values:
            if name not in self._decls:
                problems.append(problem(
                    f"{where}.parameters.{name}",
                    f"is not a parameter of kind {self.kind!r}",
                    f"{close_match_hint(name, known)}known parameters: {', '.join(sorted(known))}",
                ))
        if not partial:
            for name in known:
                if name not in values:
                    problems.append(problem(
                        f"{where}.parameters.{name}",
                        "is missing from the loaded values",
                        f"give every parameter of kind {self.kind!r}: {', '.join(known)}",
                    ))
        checked: dict[str, np.ndarray] = {}
        for name, raw in values.items():
            decl = self._decls.get(name)
            if decl is None:
                continue
            arr, found = check_value(
                decl,
                raw,
                self._low[name].numpy(),
                self._high[name].numpy(),
                field=f"{where}.parameters.{name}",
                bounds_field=f"{where}.bounds.{name}",
            )
            problems.extend(found)
            if arr is not None:
                checked[name] = arr
        if problems:
            raise ControllerError(problems)
        with torch.no_grad():
            for name, arr in checked.items():
                self.value(name).copy_(torch.from_numpy(arr))

    def describe(self) -> list[dict[str, Any]]:
        """Rows for tables and JSON: name, shape, unit, value, low, high, trainable, doc."""
        values, bounds = self.parameter_values(), self.parameter_bounds()
        return [
            {
                "name": d.name,
                "shape": list(d.shape),
                "unit": d.unit,
                "value": values[d.name].tolist(),
                "low": bounds[d.name][0].tolist(),
                "high": bounds[d.name][1].tolist(),
                "trainable": d.trainable,
                "doc": d.doc,
            }
            for d in self._decls.values()
        ]

    # ----- evaluation -------------------------------------------------------

    def _tensors(self, state: Mapping[str, Any], skill_time: Any) -> tuple[dict[str, torch.Tensor], torch.Tensor]:
        """Checked float64 tensors of the quantities read, and skill_time as (B,)."""
        missing = [n for n in self._shapes if n not in state]
        if missing:
            raise ValueError(
                f"state must hold {', '.join(repr(n) for n in missing)} for controller kind {self.kind!r}, "
                f"got only {', '.join(sorted(state)) or 'nothing'}; give every name in inputs {self.inputs} and needs {self.needs}"
            )
        x: dict[str, torch.Tensor] = {}
        batch: int | None = None
        for name, shape in self._shapes.items():
            raw = state[name]
            t = raw.to(_F64) if isinstance(raw, torch.Tensor) else _tensor(raw)
            if batch is None and t.dim() >= 1:
                batch = int(t.shape[0])
            if tuple(t.shape) != (batch, *shape):
                raise ValueError(
                    f"state[{name!r}] must have shape (batch, {', '.join(map(str, shape))}) = {(batch, *shape)}, "
                    f"got {tuple(t.shape)}; give one row per state"
                )
            x[name] = t
        assert batch is not None
        t = skill_time.to(_F64) if isinstance(skill_time, torch.Tensor) else _tensor(skill_time)
        if t.dim() == 0:
            t = t.expand(batch)
        if tuple(t.shape) != (batch,):
            raise ValueError(f"skill_time must have shape ({batch},) like the state batch, got {tuple(t.shape)}; give one time per state")
        return x, t

    def mean(self, state: Mapping[str, Any], skill_time: Any) -> torch.Tensor:
        """(B, n_act) mean action, unclipped, differentiable in the parameters."""
        x, t = self._tensors(state, skill_time)
        return self._mean(x, t)

    def distribution(self, state: Mapping[str, Any], skill_time: Any) -> torch.distributions.Normal:
        """Gaussian over actions: loc = mean, scale = exp(log_std) per actuator."""
        loc = self.mean(state, skill_time)
        return torch.distributions.Normal(loc, torch.exp(self.log_std).expand_as(loc))

    def act(
        self,
        state: Mapping[str, np.ndarray],
        skill_time: np.ndarray,
        *,
        explore: bool = False,
        generator: torch.Generator | None = None,
        noise: np.ndarray | None = None,
    ) -> np.ndarray:
        """(B, n_act) float64 actions for a whole batch, clipped to the actuator limits.

        ``explore`` adds exp(log_std) * N(0, 1) drawn from ``generator`` (torch's
        global generator when None). ``noise`` instead supplies the standard-normal
        draws (B, n_act), e.g. from per-episode streams; the sum is then clipped.
        """
        with torch.no_grad():
            mean = self.mean(state, skill_time)
            if noise is not None:
                eps = _tensor(noise)
                if tuple(eps.shape) != tuple(mean.shape):
                    raise ValueError(f"noise must have shape {tuple(mean.shape)}, got {tuple(eps.shape)}; give one row per state")
                mean = mean + torch.exp(self.log_std) * eps
            elif explore:
                eps = torch.randn(mean.shape, generator=generator, dtype=_F64)
                mean = mean + torch.exp(self.log_std) * eps
            action = torch.clamp(mean, self._action_low, self._action_high)
            return action.numpy().astype(np.float64, copy=True)

    # ----- helpers for kinds ------------------------------------------------

    def actuated_qpos(self, x: dict[str, torch.Tensor]) -> torch.Tensor:
        """(B, n_act) positions of the actuated joints."""
        return x["qpos"].index_select(1, self._qpos_index)

    def actuated_qvel(self, x: dict[str, torch.Tensor]) -> torch.Tensor:
        """(B, n_act) velocities of the actuated joints."""
        return x["qvel"].index_select(1, self._qvel_index)

    def extra_repr(self) -> str:
        return f"kind={self.kind!r}, n_act={self.n_act}, inputs={self.inputs}, needs={self.needs}"
