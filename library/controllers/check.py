"""``check_controller``: the contract every controller must keep, runnable in users' own CI."""

from __future__ import annotations

import copy
from typing import Any, Mapping

import numpy as np
import torch

from .serialize import load_parameters, save_parameters

__all__ = ["check_controller"]


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    return a.shape == b.shape and a.dtype == b.dtype and a.tobytes() == b.tobytes()


def _row(states: Mapping[str, np.ndarray], i: int) -> dict[str, np.ndarray]:
    return {k: np.asarray(v)[i : i + 1] for k, v in states.items()}


def _check_inputs(controller: Any, states: Mapping[str, np.ndarray]) -> tuple[list[str], int | None]:
    problems: list[str] = []
    layout = controller.context.layout
    for name in controller.inputs:
        if name not in layout:
            problems.append(f"input {name!r} is not in the state layout; known: {', '.join(layout.names)}")
    wanted = {name: tuple(layout[name].shape) for name in controller.inputs if name in layout}
    wanted.update({name: (3, controller.context.nv) for name in controller.needs})
    batch = None
    for name, shape in wanted.items():
        if name not in states:
            problems.append(f"states must hold {name!r}, which the controller reads")
            continue
        arr = np.asarray(states[name])
        batch = arr.shape[0] if batch is None and arr.ndim else batch
        if arr.shape != (batch, *shape):
            problems.append(f"states[{name!r}] must have shape {(batch, *shape)}, got {arr.shape}")
    if batch is not None and batch < 2:
        problems.append(f"states must hold at least 2 rows to compare batched and row-by-row actions, got {batch}")
    return problems, batch


def _perturbed_out_of_bounds(controller: Any) -> None:
    """A deliberately bad optimiser step: push every parameter past both bounds."""
    with torch.no_grad():
        for name, (low, high) in controller.parameter_bounds().items():
            t = controller.value(name)
            span = torch.tensor(high - low, dtype=torch.float64)
            sign = torch.where(torch.arange(t.numel()).reshape(t.shape) % 2 == 0, 1.0, -1.0).to(torch.float64)
            t.add_(sign * 2.0 * span)


def check_controller(controller: Any, *, states: Mapping[str, np.ndarray], seed: int) -> list[str]:
    """Problems with ``controller`` on a batch of ``states`` (at least 2 rows); empty when it keeps the contract.

    Checks: inputs exist in the layout and the states; actions are (B, n_act)
    float64, finite and inside the action space; explore=True with equal
    generators gives equal actions; the batched call equals row-by-row calls
    bit for bit; parameters survive save/load bit for bit; ``project_()``
    restores the bounds after an out-of-bounds step and leaves in-bound
    values untouched; the Gaussian head's log-probabilities are finite. The
    controller itself is not changed.
    """
    problems, batch = _check_inputs(controller, states)
    if problems or batch is None:
        return problems
    ctx = controller.context
    times = np.random.default_rng(seed).uniform(0.0, 2.0, size=batch)
    before = {k: np.array(v, copy=True) for k, v in states.items()}

    def act(explore: bool = False, gen_seed: int | None = None, rows: Any = None, c: Any = controller) -> np.ndarray:
        s, t = (states, times) if rows is None else (_row(states, rows), times[rows : rows + 1])
        g = None if gen_seed is None else torch.Generator().manual_seed(gen_seed)
        return c.act(s, t, explore=explore, generator=g)

    plain = act()
    if plain.shape != (batch, ctx.n_act) or plain.dtype != np.float64:
        problems.append(f"act must return float64 of shape {(batch, ctx.n_act)}, got {plain.dtype} {plain.shape}")
        return problems
    for label, actions in (("act", plain), ("act(explore=True)", act(True, seed))):
        if not np.all(np.isfinite(actions)):
            problems.append(f"{label} returned non-finite actions in rows {np.flatnonzero(~np.isfinite(actions).all(1)).tolist()}")
        if np.any(actions < ctx.action_low) or np.any(actions > ctx.action_high):
            problems.append(f"{label} returned actions outside [action_low, action_high]")
    if not _same_bits(plain, act()):
        problems.append("act is not deterministic: two calls on the same states differ")
    if not _same_bits(act(True, seed), act(True, seed)):
        problems.append("act(explore=True) differs between two generators seeded alike")
    rows = np.concatenate([act(rows=i) for i in range(batch)])
    if not _same_bits(plain, rows):
        worst = float(np.max(np.abs(plain - rows))) if rows.shape == plain.shape else float("nan")
        problems.append(f"batched actions differ from row-by-row actions (max |difference| {worst:g}); make the mean batch-invariant")
    with torch.no_grad():
        mean = controller.mean(states, times).numpy()
    if not _same_bits(np.clip(mean, ctx.action_low, ctx.action_high), plain):
        problems.append("act(explore=False) must equal the mean clipped to the action space")

    values = controller.parameter_values()
    try:
        loaded = load_parameters(save_parameters(controller))
    except Exception as exc:  # report, do not raise: this is a checker
        problems.append(f"parameters do not survive save/load: {exc}")
        loaded = None
    if loaded is not None:
        if set(loaded) != set(values) or not all(_same_bits(values[k], loaded[k]) for k in values):
            problems.append("parameters change in a save/load round trip")
        twin = copy.deepcopy(controller)
        try:
            twin.load_values(loaded)
            if not _same_bits(act(c=twin), plain):
                problems.append("a controller with loaded parameters acts differently")
        except Exception as exc:
            problems.append(f"load_values rejects the saved parameters: {exc}")

    twin = copy.deepcopy(controller)
    twin.project_()
    after = twin.parameter_values()
    if not all(_same_bits(values[k], after[k]) for k in values):
        problems.append("project_() changed parameters that were inside their bounds")
    _perturbed_out_of_bounds(twin)
    twin.project_()
    for name, (low, high) in twin.parameter_bounds().items():
        v = twin.parameter_values()[name]
        if not (np.all(v >= low) and np.all(v <= high)):
            problems.append(f"parameter {name!r} is outside its bounds after project_()")

    try:
        with torch.no_grad():
            logp = controller.distribution(states, times).log_prob(torch.from_numpy(plain)).sum(-1)
        if not bool(torch.all(torch.isfinite(logp))):
            problems.append("the Gaussian head gives non-finite log-probabilities")
    except ValueError as exc:  # torch's argument validation rejects a NaN mean
        problems.append(f"the Gaussian head cannot be built: {str(exc).splitlines()[0]}")
    if any(not np.array_equal(before[k], np.asarray(states[k])) for k in before):
        problems.append("the controller changed the state arrays it was given")
    return problems
