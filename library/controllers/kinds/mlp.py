"""Declaration of the ``mlp`` kind: its settings and parameters, without torch
(the torch implementation is ``controllers/mlp.py``)."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from ...errors import Problem
from ..context import ControllerContext
from ..errors import problem
from ..inputs import DEFAULT_INPUTS, input_size, normalise_inputs
from ..kind import ControllerKind
from ..params import ParamDecl
from ..registry import declares_kind

__all__ = ["MLPPolicyKind", "WEIGHT_BOUND", "init_weights", "ACTIVATION_NAMES"]

WEIGHT_BOUND = 20.0  # default |w|, |b| bound: wide enough for any tanh/relu net of this size
NORMALISER_BOUND = 1.0e9
STD_FLOOR = 1.0e-9
INITS = ("orthogonal", "uniform")
OUTPUT_SCALE = 0.01  # last layer starts small so the initial mean sits near mid-range (common practice)
ACTIVATION_NAMES = ("tanh", "relu")


def _layer_sizes(n_in: int, hidden: tuple[int, ...], n_out: int) -> list[tuple[int, int]]:
    sizes = [n_in, *hidden, n_out]
    return [(sizes[i + 1], sizes[i]) for i in range(len(sizes) - 1)]


def _orthogonal(rng: np.random.Generator, rows: int, cols: int, gain: float) -> np.ndarray:
    """A (rows, cols) matrix with orthonormal rows or columns times ``gain`` (QR of a Gaussian matrix,
    signs fixed by diag(R), as torch.nn.init.orthogonal_ does; Saxe, McClelland & Ganguli 2014)."""
    a = rng.standard_normal((max(rows, cols), min(rows, cols)))
    q, r = np.linalg.qr(a)
    q = q * np.sign(np.diag(r))
    return gain * (q if rows >= cols else q.T)


def init_weights(n_in: int, hidden: tuple[int, ...], n_out: int, seed: int, init: str = "orthogonal") -> dict[str, np.ndarray]:
    """Deterministic initial ``w{i}`` (out, in) and ``b{i}`` (out,) for ``seed``; biases zero.

    ``orthogonal`` (the default): orthogonal weights with gain sqrt(2) in hidden layers and 0.01 in the
    last, so the initial mean action sits near mid-range (common practice for the clipped-surrogate
    method). ``uniform``: U(-1/sqrt(fan_in), 1/sqrt(fan_in)) (the scale of torch's default Linear init,
    from memory), the last layer scaled by 0.01 (the only init before this setting existed).
    """
    if init not in INITS:
        raise ValueError(f"init must be one of {', '.join(INITS)}, got {init!r}")
    rng = np.random.default_rng(int(seed))
    layers = _layer_sizes(n_in, hidden, n_out)
    out: dict[str, np.ndarray] = {}
    for i, (fan_out, fan_in) in enumerate(layers):
        last = i == len(layers) - 1
        if init == "orthogonal":
            w = _orthogonal(rng, fan_out, fan_in, OUTPUT_SCALE if last else float(np.sqrt(2.0)))
        else:
            bound = 1.0 / np.sqrt(fan_in)
            w = rng.uniform(-bound, bound, size=(fan_out, fan_in)) * (OUTPUT_SCALE if last else 1.0)
        out[f"w{i}"] = np.clip(w, -WEIGHT_BOUND, WEIGHT_BOUND)
        out[f"b{i}"] = np.zeros(fan_out)
    return out


@declares_kind("mlp")
class MLPPolicyKind(ControllerKind):
    """A feed-forward network from named state to actions, for what no formula captures.

    s = the ``inputs`` quantities flattened and normalised by ``input_mean`` /
    ``input_std`` (stored, not trained, so a trainer's running normaliser is
    saved with the weights); z = W_L act(... act(W_0 s + b_0)) + b_L; the action
    is mid + half_range tanh(z), always inside the actuator range. Settings:
    ``inputs`` (default [qpos, qvel]), ``hidden`` (default [64, 64]),
    ``activation`` (tanh or relu), ``init_seed`` (default 0), ``init``
    (orthogonal, the default, or uniform; see ``init_weights``). Use it when a
    structured kind cannot express the behaviour and the trainer will learn it.
    """

    SETTINGS = {"inputs": DEFAULT_INPUTS, "hidden": (64, 64), "activation": "tanh", "init_seed": 0, "init": "orthogonal"}
    @classmethod
    def _normalise_settings(
        cls, context: ControllerContext, settings: dict[str, Any], where: str, problems: list[Problem]
    ) -> dict[str, Any]:
        inputs = normalise_inputs(context, settings["inputs"], f"{where}.settings.inputs", problems)
        hidden = settings["hidden"]
        if (
            isinstance(hidden, str)
            or not isinstance(hidden, (list, tuple))
            or not all(isinstance(h, (int, np.integer)) and not isinstance(h, bool) and 1 <= h <= 4096 for h in hidden)
        ):
            problems.append(problem(f"{where}.settings.hidden", f"must be a list of layer widths in [1, 4096], got {hidden!r}",
                                    "e.g. [64, 64]; [] gives a single tanh layer"))
            hidden = cls.SETTINGS["hidden"]
        activation = settings["activation"]
        if activation not in ACTIVATION_NAMES:
            problems.append(problem(f"{where}.settings.activation", f"must be one of {', '.join(ACTIVATION_NAMES)}, got {activation!r}",
                                    "use tanh (the default) or relu"))
        seed = settings["init_seed"]
        if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
            problems.append(problem(f"{where}.settings.init_seed", f"must be a non-negative integer, got {seed!r}", "e.g. 0"))
            seed = 0
        init = settings["init"]
        if init not in INITS:
            problems.append(problem(f"{where}.settings.init", f"must be one of {', '.join(INITS)}, got {init!r}",
                                    "use orthogonal (the default) or uniform"))
            init = cls.SETTINGS["init"]
        return {"inputs": inputs, "hidden": tuple(int(h) for h in hidden), "activation": activation, "init_seed": int(seed),
                "init": init}

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        n_in = input_size(context, settings["inputs"])
        init = init_weights(n_in, settings["hidden"], context.n_act, settings["init_seed"], settings["init"])
        decls = [
            ParamDecl("input_mean", (n_in,), -NORMALISER_BOUND, NORMALISER_BOUND, 0.0, "input normaliser: mean",
                      "input units", trainable=False, shape_help=f"give one value per flattened input value ({n_in})"),
            ParamDecl("input_std", (n_in,), STD_FLOOR, NORMALISER_BOUND, 1.0, "input normaliser: standard deviation",
                      "input units", limit_low=STD_FLOOR, trainable=False,
                      shape_help=f"give one value per flattened input value ({n_in})"),
        ]
        for i, (fan_out, fan_in) in enumerate(_layer_sizes(n_in, settings["hidden"], context.n_act)):
            decls.append(ParamDecl(f"w{i}", (fan_out, fan_in), -WEIGHT_BOUND, WEIGHT_BOUND, init[f"w{i}"],
                                   f"layer {i} weights (out, in)", shape_help=f"give a ({fan_out}, {fan_in}) array"))
            decls.append(ParamDecl(f"b{i}", (fan_out,), -WEIGHT_BOUND, WEIGHT_BOUND, init[f"b{i}"],
                                   f"layer {i} biases", shape_help=f"give {fan_out} values"))
        return tuple(decls)

    @classmethod
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        return tuple(settings["inputs"])
