"""Learning curves: rows of per-update numbers saved as CSV and plotted as PNG (Agg)."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path
from typing import Any, Sequence

from kinetome.library.safety import CAUTION_FOOTER

from .atomic import write_atomic

__all__ = ["CURVE_COLUMNS", "curve_csv", "current_curve_row", "save_curves", "plot_curves"]

CURVE_COLUMNS = (
    "update",
    "env_steps",
    "episodes",
    "return_mean",
    "success_rate",
    "mean_duration",
    "stop_rate",
    "mean_skill_duration",
    "policy_loss",
    "value_loss",
    "termination_loss",
    "entropy",
    "approx_kl",
    "clip_fraction",
    "explained_variance",
    "learning_rate",
    "steps_per_s",
    "eval_success_rate",
    "eval_return",
)


def current_curve_row(row: dict[str, Any]) -> dict[str, Any]:
    """A curve row under today's column names (checkpoints written before the rename hold old ones)."""
    from kinetome.library.renamed_keys import CURVE_RENAMES

    return {CURVE_RENAMES.get(k, k): v for k, v in row.items()}


def curve_csv(rows: Sequence[dict[str, float]]) -> str:
    """CSV text with the fixed columns (missing values empty)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CURVE_COLUMNS)
    for row in rows:
        cells = []
        for col in CURVE_COLUMNS:
            v = row.get(col)
            cells.append("" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.6g}" if isinstance(v, float) else str(v))
        writer.writerow(cells)
    return buf.getvalue()


def plot_curves(rows: Sequence[dict[str, float]], path: str | Path, *, title: str = "training") -> None:
    """Return, success rate and losses against env steps, one PNG."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    steps = [r["env_steps"] for r in rows]
    fig, axes = plt.subplots(1, 3, figsize=(12, 3.4))
    panels = (
        ("return", ("return_mean", "eval_return")),
        ("success rate", ("success_rate", "eval_success_rate")),
        ("losses", ("value_loss", "policy_loss", "termination_loss")),
    )
    for ax, (label, cols) in zip(axes, panels):
        for col in cols:
            xs = [s for s, r in zip(steps, rows) if _finite(r.get(col))]
            ys = [r[col] for r in rows if _finite(r.get(col))]
            if ys:
                ax.plot(xs, ys, marker="." if len(ys) < 30 else None, label=col)
        ax.set_xlabel("env steps")
        ax.set_title(label)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=7)
    fig.suptitle(title)
    fig.text(0.5, 0.01, CAUTION_FOOTER, ha="center", va="bottom", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.05, 1, 1))
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, metadata={"Caution": CAUTION_FOOTER})
    plt.close(fig)
    write_atomic(Path(path), buf.getvalue())


def _finite(v: object) -> bool:
    return isinstance(v, (int, float)) and math.isfinite(v)


def save_curves(rows: Sequence[dict[str, float]], directory: str | Path, *, stem: str = "curves", title: str = "training") -> tuple[Path, Path]:
    """Write ``<stem>.csv`` and ``<stem>.png`` into ``directory``; return both paths."""
    directory = Path(directory)
    csv_path, png_path = directory / f"{stem}.csv", directory / f"{stem}.png"
    write_atomic(csv_path, curve_csv(rows).encode("utf-8"))
    plot_curves(rows, png_path, title=title)
    return csv_path, png_path
