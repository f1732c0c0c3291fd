"""The text ``kinetome sweep`` prints for a sweep result (and ``show`` for a stored region)."""

from __future__ import annotations

from typing import Any, Mapping

from .region import PASS

__all__ = ["format_sweep", "format_region", "cell_label", "lower_text"]


def cell_label(values: Mapping[str, Any]) -> str:
    """``payload_mass=0.6, actuator_gain=0.8`` (axes in the order given)."""
    return ", ".join(f"{k}={v:g}" if isinstance(v, (int, float)) else f"{k}={v}" for k, v in values.items())


def format_region(region: Mapping[str, Any], *, indent: str = "  ") -> list[str]:
    """The region in words: requirement, method, and every passing cell."""
    cells = region["cells"]
    lines = [
        f"{indent}valid for {len(cells)} of {region['cells_evaluated']} evaluated cells (success >= {region['require']:g}, "
        f"confidence {region['confidence']:g}, {region['correction']} correction); base variant {region['base_variant']['name']}",
    ]
    ordered = [{a: c[a] for a in region["axes"] if a in c} for c in cells]
    lines += [f"{indent}  {cell_label(c)}" for c in ordered] or [f"{indent}  (no cell clears the requirement)"]
    lines.append(f"{indent}method: {region['method']}")
    return lines


def lower_text(cell: Mapping[str, Any], require: float) -> str:
    """A cell's corrected lower bound as shown. Under Holm's step-down a cell after the first failing one
    is never tested, so a bound at or above the requirement there does not make it pass: say so."""
    text = f"{cell['corrected_lower']:.3f}"
    if cell["mark"] != PASS and cell["corrected_lower"] >= require:
        text += " (not tested: the step-down stopped at an earlier cell)"
    return text


def format_sweep(result: Mapping[str, Any]) -> str:
    from ..cli.output import format_table

    axes = [a["name"] for a in result["axes"]]
    t = result["target"]
    cells = result["cells"]
    head = (f"sweep {result['name']}: {t['kind']} {t['label']} ({', '.join(t['skills'])}) on {result['env']}, "
            f"{len(cells)} cells x {result['episodes_per_cell']} episodes, seed {result['seed']}")
    if result.get("reused"):
        head += f"\nreused the stored result {result['artifact']} (same identities, task, settings and software): nothing simulated"
    conf = result["region"]["confidence"]
    rows = []
    for c in cells:
        low, high = c["interval"]
        row = {"index": c["index"], **{a: c["values"][a] for a in axes}}
        row.update(success=f"{c['successes']}/{c['episodes']} = {c['success_rate']:.3f}" if c["episodes"] else "0/0",
                   interval=f"{low:.3f} to {high:.3f}", lower=lower_text(c, result["region"]["require"]), run=c["episodes_run"],
                   mark=c["mark"])
        rows.append(row)
    columns = [("index", "#"), *[(a, a.upper()) for a in axes], ("success", "SUCCESS (DISTINCT)"),
               ("interval", f"{conf:.0%} EXACT INTERVAL"), ("lower", "CORRECTED LOWER"), ("run", "EPISODES RUN"), ("mark", "MARK")]
    lines = [head, format_table(rows, columns), "", "valid-for region"]
    lines += format_region(result["region"])
    ranking = ", ".join(f"{r['axis']} {r['effect']:.3f}" for r in result["axis_ranking"])
    lines.append(f"axes by effect on success ({result['ranking_rule']}): {ranking}")
    if result.get("artifact") and not result.get("reused"):
        lines.append(f"stored as {result['artifact']}")
    elif not result.get("artifact"):
        lines.append("not stored: the target includes a spec file, which has no version to attach evidence to")
    for name, path in (result.get("files") or {}).items():
        lines.append(f"{name:<9} {path}")
    lines.append(result["caution"])
    return "\n".join(lines)
