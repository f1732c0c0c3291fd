"""Picture of a learned initiation region: sampled start states (stopped / not) on the two state
components that matter most, with the proposed and the hand-written ``starts_when`` boundaries.

Both boundaries are the predicates themselves evaluated on a grid over the two components, every
other quantity held at the median of the successful start states (a slice, said on the plot).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

__all__ = ["plot_initiation", "component_label"]


def component_label(quantity: str, index: int | None) -> str:
    return quantity if index is None else f"{quantity}[{index}]"


def _column(states: Mapping[str, np.ndarray], quantity: str, index: int | None) -> np.ndarray:
    v = np.asarray(states[quantity], dtype=np.float64)
    return v.reshape(v.shape[0]) if index is None else v.reshape(v.shape[0], -1)[:, index]


def _grid_state(states, success, axes, xs, ys) -> dict[str, np.ndarray]:
    """Every quantity at the median of the successful starts, the two axes swept over the grid."""
    rows = success if np.any(success) else np.ones_like(success)
    X, Y = np.meshgrid(xs, ys)
    out = {}
    for q, v in states.items():
        med = np.median(np.asarray(v, dtype=np.float64)[rows], axis=0)
        out[q] = np.repeat(med[None], X.size, axis=0)
    for (q, i), values in zip(axes, (X.reshape(-1), Y.reshape(-1))):
        if i is None:
            out[q][:] = values
        else:
            flat = out[q].reshape(X.size, -1)
            flat[:, i] = values
            out[q] = flat.reshape(out[q].shape)
    return out


def _span(col: np.ndarray) -> np.ndarray:
    lo, hi = float(np.min(col)), float(np.max(col))
    pad = 0.08 * (hi - lo) if hi > lo else 0.05 * max(1.0, abs(lo))
    return np.linspace(lo - pad, hi + pad, 240)


def _draw_boundary(ax, pred, parameters, state, X, Y, colour, style, label) -> bool:
    inside = np.asarray(pred.evaluate({**parameters, **state}), dtype=float).reshape(X.shape)
    if inside.min() == inside.max():
        return False
    ax.contour(X, Y, inside, levels=[0.5], colors=[colour], linestyles=[style], linewidths=1.8)
    ax.plot([], [], color=colour, linestyle=style, label=label)
    return True


def plot_initiation(
    states: Mapping[str, np.ndarray],
    success: np.ndarray,
    axes: Sequence[tuple[str, int | None]],
    loaded: Any,
    proposed: str | None,
    path: Path,
    *,
    title: str = "",
) -> Path:
    """Write the PNG (caution footer included) and return its path."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from ..predicates import parse_predicate
    from ..safety import CAUTION_FOOTER

    success = np.asarray(success, dtype=bool)
    axes = list(axes) if len(axes) >= 2 else [axes[0], axes[0]]
    xs, ys = _span(_column(states, *axes[0])), _span(_column(states, *axes[1]))
    grid = _grid_state(states, success, axes, xs, ys)
    X, Y = np.meshgrid(xs, ys)
    fig = Figure(figsize=(6.6, 5.0), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    px, py = _column(states, *axes[0]), _column(states, *axes[1])
    ax.scatter(px[~success], py[~success], s=10, c="#a42323", marker="x", alpha=0.6, label=f"did not stop ({int((~success).sum())})")
    ax.scatter(px[success], py[success], s=8, c="#2f6f9e", alpha=0.5, label=f"stopped by stops_when ({int(success.sum())})")
    shapes = {**{k: np.shape(v) for k, v in loaded.parameters.items()}, **{k: np.shape(v)[1:] for k, v in states.items()}}
    state = grid
    notes = []
    for text, colour, style, label in ((proposed, "#1f7a3a", "-", "proposed starts_when"),
                                       (str(loaded.starts_when), "#d08b00", "--", "hand-written starts_when")):
        if text is None:
            continue
        pred = parse_predicate(text, shapes, what=label)
        if not _draw_boundary(ax, pred, loaded.parameters, state, X, Y, colour, style, label):
            held = bool(np.asarray(pred.evaluate({**loaded.parameters, **{k: v[:1] for k, v in state.items()}}))[0])
            notes.append(f"{label} {'holds everywhere' if held else 'holds nowhere'} in this slice")
    ax.set_xlabel(component_label(*axes[0]))
    ax.set_ylabel(component_label(*axes[1]))
    ax.set_title((title + "\n" if title else "") + "other quantities at the median of the successful starts", fontsize=9)
    if notes:
        ax.text(0.02, 0.02, "\n".join(notes), transform=ax.transAxes, fontsize=8, color="#444444")
    ax.legend(loc="upper right", fontsize=7)
    fig.tight_layout()
    fig.text(0.5, 0.005, CAUTION_FOOTER, ha="center", va="bottom", fontsize=6, color="0.3")
    fig.savefig(path, metadata={"Caution": CAUTION_FOOTER})
    return Path(path)
