"""Report of a chain check: the text summary, the JSON, and PNG plots (matplotlib, Agg canvas).

Per handoff: the end states of A (start states for the entry) projected on the
two state components that matter most for B's ``starts_when``, with that set's
boundary drawn (B's predicate evaluated on a grid over the two components, the
others fixed at their median, contoured where it flips). Per chain: a timeline
of each skill's duration.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any, Mapping

import numpy as np

__all__ = ["write_report", "choose_components", "boundary_grid", "plot_handoff", "plot_timeline"]

Component = tuple[str, int]


def _flat(values: Mapping[str, np.ndarray], name: str) -> np.ndarray:
    arr = np.asarray(values[name], dtype=np.float64)
    return arr.reshape(arr.shape[0], -1)


def _label(name: str, shape: tuple[int, ...], k: int) -> str:
    if not shape:
        return name
    return name + "".join(f"[{i}]" for i in np.unravel_index(k, shape))


def _with_component(values: Mapping[str, np.ndarray], comp: Component, column: np.ndarray) -> dict[str, np.ndarray]:
    name, k = comp
    out = dict(values)
    arr = np.array(values[name], dtype=np.float64, copy=True)
    flat = arr.reshape(arr.shape[0], -1)
    flat[:, k] = column
    out[name] = flat.reshape(arr.shape)
    return out


def _median_state(values: Mapping[str, np.ndarray], n: int) -> dict[str, np.ndarray]:
    """Every quantity at its per-component median, repeated ``n`` times."""
    out = {}
    for name, v in values.items():
        arr = np.asarray(v, dtype=np.float64)
        med = np.median(arr, axis=0)
        out[name] = np.repeat(med[None], n, axis=0)
    return out


def choose_components(pred: Any, parameters: Mapping[str, np.ndarray], points: Mapping[str, np.ndarray]) -> list[Component]:
    """The (up to) two state components that matter most for ``pred`` on these points.

    Clauses are ranked by how many points violate them; among the state
    components the top clauses read, each is scored by how many of those
    clause values change when the component alone is set to its median (the
    points' own evidence), then by how often the predicate flips along a sweep
    of that component through the median state, then by spread.
    """
    names = sorted(n for n in pred.names if n in points and n not in parameters)
    if not names:
        return []
    n = _flat(points, names[0]).shape[0]
    clauses = list(pred.clauses())
    merged = {**points, **parameters}
    fails = [int(np.sum(~c.evaluate(merged))) for c in clauses]
    worst = max(fails) if fails else 0
    top = [c for c, f in zip(clauses, fails) if f == worst and f > 0] or clauses
    read = sorted({m for c in top for m in c.names if m in names}) or names
    candidates = [(m, k) for m in read for k in range(_flat(points, m).shape[1])]
    base = [c.evaluate(merged) for c in top]
    med = _median_state({k: v for k, v in points.items() if k in pred.names}, 41)
    scores = []
    for comp in candidates:
        col = _flat(points, comp[0])[:, comp[1]]
        spread = float(np.std(col))
        moved = _with_component(points, comp, np.full(n, np.median(col)))
        changed = sum(int(np.sum(c.evaluate({**moved, **parameters}) != b)) for c, b in zip(top, base))
        lo, hi = float(np.min(col)), float(np.max(col))
        pad = max(0.5 * (hi - lo), 0.05 * max(1.0, abs(lo), abs(hi)))
        sweep = _with_component(med, comp, np.linspace(lo - pad, hi + pad, 41))
        flips = int(np.sum(np.diff(pred.evaluate({**sweep, **parameters}).astype(int)) != 0))
        scores.append((changed, flips, spread, comp))
    scores.sort(key=lambda s: (-s[0], -s[1], -s[2]))
    chosen = [s[3] for s in scores[:2]]
    if len(chosen) < 2:
        others = [(m, k) for m in names for k in range(_flat(points, m).shape[1]) if (m, k) not in chosen]
        others.sort(key=lambda c: -float(np.std(_flat(points, c[0])[:, c[1]])))
        chosen += others[: 2 - len(chosen)]
    return chosen


def _span(pred: Any, parameters: Mapping[str, np.ndarray], base: Mapping[str, np.ndarray], points: Mapping[str, np.ndarray], comp: Component, pad: float) -> tuple[float, float]:
    """Range of the points along ``comp``, widened to take in where ``pred`` flips along that axis."""
    col = _flat(points, comp[0])[:, comp[1]]
    lo, hi = float(np.min(col)), float(np.max(col))
    width = hi - lo
    reach = max(3.0 * width, 0.5 * max(abs(lo), abs(hi)), 0.05)
    sweep = np.linspace(lo - reach, hi + reach, 801)
    state = _with_component({k: np.repeat(v[:1], sweep.size, axis=0) for k, v in base.items()}, comp, sweep)
    held = pred.evaluate({**state, **parameters}).astype(int)
    flips = sweep[1:][np.diff(held) != 0]
    if flips.size:
        lo, hi = min(lo, float(flips.min())), max(hi, float(flips.max()))
    width = hi - lo
    extra = pad * width if width > 0 else 0.05 * max(1.0, abs(lo))
    return lo - extra, hi + extra


def boundary_grid(
    pred: Any,
    parameters: Mapping[str, np.ndarray],
    points: Mapping[str, np.ndarray],
    x: Component,
    y: Component,
    *,
    size: int = 200,
    pad: float = 0.15,
    accepted: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(X, Y, inside) on a grid over components x and y; the other components at the points' median.

    When B's set misses that plane entirely and some points were accepted,
    the other components are fixed at the accepted points' median instead.
    The grid spans the points and the boundary crossings along each axis.
    """
    used = {k: v for k, v in points.items() if k in pred.names}

    def grid(source: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        base = _median_state(source, 1)
        xs = np.linspace(*_span(pred, parameters, base, points, x, pad), size)
        ys = np.linspace(*_span(pred, parameters, base, points, y, pad), size)
        X, Y = np.meshgrid(xs, ys)
        state = {k: np.repeat(v, X.size, axis=0) for k, v in base.items()}
        state = _with_component(state, x, X.reshape(-1))
        if y != x:
            state = _with_component(state, y, Y.reshape(-1))
        return X, Y, pred.evaluate({**state, **parameters}).reshape(X.shape)

    X, Y, inside = grid(used)
    if not np.any(inside) and accepted is not None and np.any(accepted):
        X, Y, inside = grid({k: np.asarray(v)[np.asarray(accepted, dtype=bool)] for k, v in used.items()})
    return X, Y, inside


def _figure(width: float = 6.4, height: float = 4.8) -> tuple[Any, Any]:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=100)
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot(1, 1, 1)


def _save(fig: Any, path: Path) -> None:
    """Save with the caution footer on the image and in the PNG's text chunk."""
    from ..safety import CAUTION_FOOTER

    fig.text(0.5, 0.005, CAUTION_FOOTER, ha="center", va="bottom", fontsize=6, color="0.3")
    fig.savefig(path, metadata={"Caution": CAUTION_FOOTER})


def plot_handoff(handoff: Any, layout: Any, path: Path) -> Path | None:
    """Scatter of A's end states (accepted / refused by B) over B's starts_when boundary; None without points."""
    points, accepted, source = handoff.points
    pred = handoff.starts_when
    if points is None or pred is None:
        return None
    points = {k: np.asarray(v, dtype=np.float64) for k, v in points.items() if k in pred.names}
    if not points or next(iter(points.values())).shape[0] == 0:
        return None
    comps = choose_components(pred, handoff.parameters, points)
    if not comps:
        return None
    x = comps[0]
    y = comps[1] if len(comps) > 1 else comps[0]
    shape_of = {q.name: q.shape for q in layout} if layout is not None else {}
    xl = _label(x[0], shape_of.get(x[0], ()), x[1])
    yl = _label(y[0], shape_of.get(y[0], ()), y[1])
    fig, ax = _figure()
    X, Y, inside = boundary_grid(pred, handoff.parameters, points, x, y, accepted=accepted)
    if not np.any(inside):
        ax.text(0.02, 0.02, f"{handoff.handoff.target} starts_when holds nowhere in this plane\n(other components at their median)",
                transform=ax.transAxes, fontsize=8, color="#a42323")
    if np.any(inside) and not np.all(inside):
        ax.contourf(X, Y, inside.astype(float), levels=[0.5, 1.5], colors=["#d8efe0"])
        ax.contour(X, Y, inside.astype(float), levels=[0.5], colors=["#1f7a3a"], linewidths=1.5)
    elif np.all(inside):
        ax.set_facecolor("#d8efe0")
    px = _flat(points, x[0])[:, x[1]]
    py = _flat(points, y[0])[:, y[1]] if y != x else np.zeros_like(px)
    ok = np.ones(px.shape[0], dtype=bool) if accepted is None else np.asarray(accepted, dtype=bool)
    if np.any(ok):
        ax.scatter(px[ok], py[ok], s=12, c="#2f6f9e", alpha=0.7, label=f"accepted ({int(ok.sum())})")
    if np.any(~ok):
        what = "solver states B refuses" if source == "z3" else "refused"
        ax.scatter(px[~ok], py[~ok], s=22, c="#a42323", marker="x", label=f"{what} ({int((~ok).sum())})")
    for c in handoff.counterexamples if source != "z3" else ():
        if c.source == "z3" and c.confirmed and x[0] in c.state and y[0] in c.state:
            cx = np.asarray(c.state[x[0]], dtype=np.float64).reshape(-1)[x[1]]
            cy = np.asarray(c.state[y[0]], dtype=np.float64).reshape(-1)[y[1]]
            ax.scatter([cx], [cy], s=40, c="black", marker="D", label=None)  # solver state, realised in MuJoCo
    ax.set_xlabel(xl)
    ax.set_ylabel(yl if y != x else "(one component)")
    what = "initial states" if handoff.handoff.is_entry else f"end states of {handoff.handoff.source}"
    ax.set_title(f"{handoff.label}: {handoff.verdict.value}\n{what} ({source}); green: {handoff.handoff.target} starts_when", fontsize=9)
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    _save(fig, path)
    return path


def plot_timeline(result: Any, path: Path) -> Path | None:
    """Each skill's mean start time and duration (bar), p10-p90 of its duration (whisker)."""
    stats = result.whole_chain
    if stats is None or not stats.skills:
        return None
    fig, ax = _figure(7.0, 0.7 * len(stats.skills) + 1.6)
    dt = stats.dt
    ends = [((t.start_mean if np.isfinite(t.start_mean) else 0.0) + t.duration_p90) * dt for t in stats.skills if t.ran and np.isfinite(t.duration_mean)]
    right = max(ends) if ends else 1.0
    for i, t in enumerate(stats.skills):
        if t.ran == 0 or not np.isfinite(t.duration_mean):
            ax.text(0.01 * right, i, f"never ran: {t.refused} of {t.offered} offered initial states refused", va="center", fontsize=8, color="#a42323")
            continue
        start = (t.start_mean if np.isfinite(t.start_mean) else 0.0) * dt
        ax.barh(i, t.duration_mean * dt, left=start, height=0.5, color="#2f6f5e", alpha=0.8)
        ax.errorbar(start + t.duration_p50 * dt, i, xerr=[[max(0.0, (t.duration_p50 - t.duration_p10) * dt)], [max(0.0, (t.duration_p90 - t.duration_p50) * dt)]], fmt="|", color="black", capsize=3)
        ax.text(start + t.duration_mean * dt, i, f"  {t.stopped}/{t.ran} stopped", va="center", fontsize=8)
    ax.set_yticks(range(len(stats.skills)), [t.ref for t in stats.skills], fontsize=8)
    ax.set_ylim(len(stats.skills) - 0.5, -0.5)
    ax.set_xlim(0.0, 1.45 * right)
    ax.set_xlabel("time in the chain [s] (mean start and duration; whisker: p10-p90)")
    ax.set_title(f"{result.chain.name}: {stats.success.k}/{stats.success.n} distinct trajectories completed ({stats.episodes} episodes)", fontsize=9)
    fig.tight_layout()
    _save(fig, path)
    return path


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", Path(text).stem if text.endswith((".yaml", ".yml")) else text).strip("-") or "x"


def write_report(result: Any, directory: str | Path) -> dict[str, Path]:
    """Write ``summary.txt``, ``result.json`` and the PNG plots to ``directory``; return what was written."""
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    written: dict[str, Path] = {}
    (out / "summary.txt").write_text(result.format_text() + "\n", encoding="utf-8")
    written["summary"] = out / "summary.txt"
    (out / "result.json").write_text(result.to_json() + "\n", encoding="utf-8")
    written["json"] = out / "result.json"
    if getattr(result, "reused", False):  # a stored result keeps its text and JSON, not the states behind the plots
        (out / "PLOTS.txt").write_text("no plots: this result was reused from the store; run the check with --fresh to draw them\n", encoding="utf-8")
        written["plots_note"] = out / "PLOTS.txt"
        return written
    for h in result.all_handoffs:
        kind = "entry" if h.handoff.is_entry else "handoff"
        name = f"{kind}_{h.index}_{_slug(h.handoff.source)}_to_{_slug(h.handoff.target)}.png"
        png = plot_handoff(h, result.layout, out / name)
        if png is not None:
            written[f"handoff_{h.index}"] = png
    png = plot_timeline(result, out / "timeline.png")
    if png is not None:
        written["timeline"] = png
    return written
