"""Heat map of a sweep over the two axes that change success most, cells marked pass / fail / unsure.

Colour is the success rate (pooled over any other axes); a marker in each cell gives its mark
against the requirement: a white disc for pass, a dark cross for fail, a hollow diamond for
unsure. Random-sample sweeps are drawn as points at their axis values. Matplotlib, Agg canvas;
the caution footer is on every PNG.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping

__all__ = ["heatmap_png", "write_sweep_report", "pooled_grid", "MARK_STYLE"]

# our own palette: brick red (0) through sand to slate teal (1)
_COLOURS = ("#8c2d19", "#e9d8a6", "#2f6f80")
MARK_STYLE = {
    "pass": {"marker": "o", "facecolor": "white", "edgecolor": "black", "label": "pass: corrected lower bound clears the requirement"},
    "fail": {"marker": "X", "facecolor": "#222222", "edgecolor": "white", "label": "fail: upper bound below the requirement"},
    "unsure": {"marker": "D", "facecolor": "none", "edgecolor": "black", "label": "unsure: neither"},
}


def _group_mark(marks: list[str]) -> str:
    if all(m == "pass" for m in marks):
        return "pass"
    if all(m == "fail" for m in marks):
        return "fail"
    return "unsure"


def pooled_grid(result: Mapping[str, Any], x: str, y: str | None) -> tuple[list[float], list[Any], dict[tuple, dict[str, Any]]]:
    """x values, y values and per (x, y): pooled successes/episodes and the group's mark (pass only if every cell passes)."""
    groups: dict[tuple, dict[str, Any]] = {}
    for c in result["cells"]:
        key = (c["values"][x], c["values"][y] if y else 0)
        g = groups.setdefault(key, {"successes": 0, "episodes": 0, "marks": []})
        g["successes"] += c["successes"]
        g["episodes"] += c["episodes"]
        g["marks"].append(c["mark"])
    for g in groups.values():
        g["mark"] = _group_mark(g["marks"])
    xs = sorted({k[0] for k in groups})
    ys = sorted({k[1] for k in groups})
    return xs, ys, groups


def _figure(width: float, height: float) -> tuple[Any, Any]:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=100)
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot(1, 1, 1)


def _legend(ax: Any) -> None:
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], linestyle="none", marker=s["marker"], markerfacecolor=s["facecolor"], markeredgecolor=s["edgecolor"],
                      markersize=9, label=s["label"]) for s in MARK_STYLE.values()]
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.16), fontsize=7, frameon=False, ncol=1)


def heatmap_png(result: Mapping[str, Any], path: str | Path, *, title: str | None = None) -> Path:
    """Draw the heat map of ``result`` (a sweep result) to ``path``."""
    import numpy as np
    from matplotlib.colors import LinearSegmentedColormap

    from ..safety import CAUTION_FOOTER

    ranking = [r["axis"] for r in result["axis_ranking"]]
    x, y = ranking[0], (ranking[1] if len(ranking) > 1 else None)
    units = {a["name"]: a["unit"] for a in result["axes"]}
    cmap = LinearSegmentedColormap.from_list("kinetome_success", _COLOURS)
    fig, ax = _figure(6.4, 5.6)
    if result.get("grid", True):
        xs, ys, groups = pooled_grid(result, x, y)
        rates = np.full((len(ys), len(xs)), np.nan)
        for (xv, yv), g in groups.items():
            rates[ys.index(yv), xs.index(xv)] = g["successes"] / g["episodes"] if g["episodes"] else np.nan
        image = ax.imshow(rates, origin="lower", cmap=cmap, vmin=0.0, vmax=1.0, aspect="auto")
        for (xv, yv), g in groups.items():
            i, j = ys.index(yv), xs.index(xv)
            s = MARK_STYLE[g["mark"]]
            ax.scatter([j], [i + 0.18], marker=s["marker"], s=90, facecolors=s["facecolor"], edgecolors=s["edgecolor"], linewidths=1.2)
            ax.text(j, i - 0.22, f"{g['successes']}/{g['episodes']}", ha="center", va="center", fontsize=7, color="black",
                    bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "alpha": 0.6, "linewidth": 0})
        ax.set_xticks(range(len(xs)), [f"{v:g}" for v in xs])
        ax.set_yticks(range(len(ys)), [f"{v:g}" for v in ys] if y else [""])
    else:
        vals = result["cells"]
        pts_x = [c["values"][x] for c in vals]
        pts_y = [c["values"][y] if y else 0.0 for c in vals]
        rate = [c["success_rate"] if c["episodes"] else np.nan for c in vals]
        image = ax.scatter(pts_x, pts_y, c=rate, cmap=cmap, vmin=0, vmax=1, s=260)
        for c, px, py in zip(vals, pts_x, pts_y):
            s = MARK_STYLE[c["mark"]]
            ax.scatter([px], [py], marker=s["marker"], s=50, facecolors=s["facecolor"], edgecolors=s["edgecolor"])
    ax.set_xlabel(f"{x} ({units[x]})")
    ax.set_ylabel(f"{y} ({units[y]})" if y else "")
    fig.colorbar(image, ax=ax, label="success rate (distinct episodes)")
    pooled = len(result["axes"]) > 2
    region = result["region"]
    ax.set_title(title or f"{result['target']['label']}: success over {x}" + (f" x {y}" if y else ""), fontsize=10)
    note = (f"marks against success >= {region['require']:g}, {region['correction']} correction, confidence {region['confidence']:g}"
            + ("; pooled over the other axes (pass: every cell passes)" if pooled else ""))
    fig.text(0.5, 0.035, note, ha="center", va="bottom", fontsize=7)
    _legend(ax)
    fig.subplots_adjust(bottom=0.3)
    fig.text(0.5, 0.005, CAUTION_FOOTER, ha="center", va="bottom", fontsize=6, color="0.3")
    path = Path(path)
    fig.savefig(path, metadata={"Caution": CAUTION_FOOTER})
    return path


def write_sweep_report(result: Mapping[str, Any], out: str | Path) -> dict[str, Any]:
    """Write sweep.json, sweep.txt and heatmap.png into ``out``; the result with ``files`` added."""
    from ..sweep.text import format_sweep

    folder = Path(out)
    folder.mkdir(parents=True, exist_ok=True)
    files = {"heat map": str(heatmap_png(result, folder / "heatmap.png")), "json": str(folder / "sweep.json"), "text": str(folder / "sweep.txt")}
    full = {**result, "files": files}
    (folder / "sweep.json").write_text(json.dumps(full, indent=2, sort_keys=True), encoding="utf-8")
    (folder / "sweep.txt").write_text(format_sweep(full) + "\n", encoding="utf-8")
    return full
