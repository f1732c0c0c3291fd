"""Assemble the demo's report.html from what the demo computed."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..safety import CAUTION, HANDOVER_NOTE, LIMITS_NOTE
from ..stored_meta import success_text
from .html import Report, image_html, table_html

__all__ = ["write_demo_report"]


def _skills_section(report: Report, store: Any) -> None:
    s = report.section("skills", "Skills, versions and lineage")
    s.text("Every version is immutable and content-addressed; a retrained version records its parent, the task variant, the training configuration, the seed and its before/after measurements.")
    rows = []
    for summary in store.list_skills():
        for v in store.history(summary.name):
            meta = v.meta
            variant = meta.get("variant")
            rows.append(
                {
                    "version": v.ref,
                    "reason": v.reason,
                    "parent": v.parent,
                    "env": meta.get("env"),
                    "variant": variant.get("name") if isinstance(variant, dict) else variant,
                    "lineage": " <- ".join(x.ref for x in store.lineage(v.ref)),
                    "description": meta.get("description"),
                }
            )
    s.add(table_html(rows, [("version", "Version"), ("reason", "Reason"), ("parent", "Parent"), ("env", "Env"), ("variant", "Variant"), ("lineage", "Lineage"), ("description", "Description")]))


def _checks_section(report: Report, checks: list[dict[str, Any]]) -> None:
    s = report.section("chains", "Chain verdicts")
    s.text("A handoff composes when the skill before it stops in time and the next one accepts that state. The SMT solver proves containment; simulation (one-sided exact Clopper-Pearson bounds, distinct trajectories only) shows the chain actually hands over.")
    for check in checks:
        data = check["result"]
        s.add(f"<h3>{check['name']} <small>({check['file']})</small></h3>")
        rows = [
            {
                "handoff": f"{h['from']} -> {h['to']}",
                "verdict": h["verdict"],
                "method": h["decided_by"],
                "evidence": h["reason"],
            }
            for h in data["handoffs"]
        ]
        if rows:
            s.add(table_html(rows, [("handoff", "Handoff"), ("verdict", "Verdict"), ("method", "Decided by"), ("evidence", "Evidence")], classes={"verdict": "verdict"}))
        s.add(f"<details><summary>Full checker output (exit code {check['exit_code']})</summary>")
        s.pre(check["text"])
        s.add("</details>")
        for png in sorted(Path(check["report_dir"]).glob("*.png")):
            s.add(image_html(png, f"{check['name']}: {png.stem.replace('_', ' ')}"))


def _models_section(report: Report, models: dict[str, dict[str, Any]]) -> None:
    s = report.section("models", "Option-model accuracy")
    s.text("Duration, reward and end-state models fitted from the chain rollouts, with their held-out errors: R^2 for regressions and the empirical coverage of the 90% end-state intervals.")
    for ref, info in models.items():
        s.add(f"<h3>{ref}</h3>")
        if "headlines" in info:
            s.text(f"{info['model']}, fitted from {info['episodes']} episodes of {info['chain']}.")
            s.add(table_html(info["headlines"], [("check", "Held-out check"), ("value", "Value")]))
        else:
            s.text(f"not fitted: {info.get('skipped')}")


def _retrain_section(report: Report, retrain: dict[str, Any]) -> None:
    s = report.section("retrain", "Retraining for a heavier payload")
    s.text(f"{retrain['parent']} was measured on the heavy-payload variant, retrained for {retrain['env_steps']} env steps ({retrain['wall_time_s']:.1f} s) and stored as {retrain['child']}.")
    rows = [{"when": w, "success": success_text(retrain[w]), **{k: retrain[w][k] for k in ("mean_return", "mean_duration")}} for w in ("before", "after")]
    s.add(table_html(rows, [("when", ""), ("success", "Success"), ("mean_return", "Mean return"), ("mean_duration", "Mean duration (steps)")]))
    s.text("Lineage: " + " <- ".join(retrain["lineage"]))
    png = Path(retrain["curve_png"])
    if png.exists():
        s.add(image_html(png, "learning curve on the heavy-payload variant"))


def _initiation_section(report: Report, learned: dict[str, Any] | None) -> None:
    if not learned:
        return
    s = report.section("initiation", "Where a skill really starts: a learned starts_when")
    if learned.get("no_region"):
        s.text(learned["no_region"])
        return
    s.text(f"{learned['skill']} ran from {learned['episodes']} initial states ({learned['widening_text']}) whatever its starts_when said; "
           f"{learned['successes']} ended by its stops_when. The proposal below was chosen on other episodes than the ones that measure it "
           f"(report split, exact {learned['confidence']:.0%} intervals; precision target {learned['precision_target']}); classifier: {learned['classifier']['model']}, "
           f"Brier {learned['calibration']['brier']:.3f} on the report split. It holds for the sampled initial states only.")

    def rate(r: dict[str, Any]) -> str:
        return f"{r['successes']}/{r['episodes']} = {r['rate']:.3f} [{r['interval'][0]:.3f}, {r['interval'][1]:.3f}]" if r["episodes"] else "-"

    rows = [{"which": "learned", "text": learned["proposed"], "p": rate(learned["precision"]), "r": rate(learned["recall"])},
            {"which": "hand-written", "text": learned["current"]["starts_when"], "p": rate(learned["current"]["precision"]),
             "r": rate(learned["current"]["recall"])}]
    s.add(table_html(rows, [("which", ""), ("text", "starts_when"), ("p", "Precision"), ("r", "Recall")]))
    if learned.get("plot") and Path(learned["plot"]).exists():
        s.add(image_html(Path(learned["plot"]), "start states (stopped or not) with the learned (solid) and hand-written (dashed) boundaries"))


def _sweep_section(report: Report, sweeps: list[dict[str, Any]]) -> None:
    from ..sweep.text import cell_label

    s = report.section("sweep", "Where the reach skill works: payload x motor gain, before and after the retrain")
    if not sweeps:
        return
    first = sweeps[0]["result"]
    region = first["region"]
    s.text(
        f"Each cell ran {first['episodes_per_cell']} episodes from the clearance pose with that payload mass and motor gain "
        f"(factor on every motor's gear). A cell is in the valid-for region only when its one-sided exact lower bound, "
        f"corrected across the {region['cells_evaluated']} cells ({region['correction']}), clears success {region['require']:g}; "
        "fail: its corrected upper bound is below it; unsure: neither. No interpolation between cells. The heat map's axes "
        "are the two axes that change success most (the range of the success rate over an axis's values, averaged over the other)."
    )
    for entry in sweeps:
        result = entry["result"]
        cells = result["region"]["cells"]
        s.add(f"<h3>{entry['label']} the retrain: {entry['ref']}</h3>")
        s.text(f"Valid for {len(cells)} of {result['region']['cells_evaluated']} cells: " + ("; ".join(cell_label(c) for c in cells) or "none")
               + f". Stored as {result['artifact']}" + (" (reused)." if result.get("reused") else "."))
        png = (result.get("files") or {}).get("heat map")
        if png and Path(png).exists():
            s.add(image_html(Path(png), f"{entry['ref']}: success over payload mass x motor gain, cells marked pass / fail / unsure"))
    s.text(f"Method: {region['method']}.")


def _filmstrip_section(report: Report, strips: dict[str, dict[str, Any]]) -> None:
    from kinetome.envs.render_backend import RENDERER_LABELS

    s = report.section("filmstrips", "Filmstrips")
    s.text(
        "One episode of each chain, left to right. Frames are spread over the whole chain by how far the "
        "robot moved; each is labelled with its time and the running skill, and frames with an orange "
        "border are handoffs (the state the next skill starts from)."
    )
    for name, strip in strips.items():
        drawn_by = RENDERER_LABELS.get(strip["renderer"], strip["renderer"])
        s.add(image_html(Path(strip["path"]), f"{name}: one episode, left to right; drawn by {drawn_by}"))


def write_demo_report(out: Path, *, store: Any, summary: dict[str, Any], checks: list[dict[str, Any]], strips: dict[str, dict[str, Any]]) -> Path:
    """Write ``out/report.html``: self-contained, every section from this run."""
    report = Report(
        title="kinetome demo: a workshop's bench arm and test walker",
        subtitle=f"{'Quick' if summary['quick'] else 'Full'} run, {summary['seconds']} s. Invented demo scenario; every number below was computed in this run.",
        caution=CAUTION,
    )
    _skills_section(report, store)
    _checks_section(report, checks)
    if "plan" in summary:
        from .plan_section import plan_section

        plan_section(report, summary["plan"])
    _models_section(report, summary["models"])
    _retrain_section(report, summary["retrain"])
    _initiation_section(report, summary.get("initiation"))
    _sweep_section(report, summary.get("sweeps", []))
    _filmstrip_section(report, strips)
    safety = report.section("safety", "Safety")
    safety.text(CAUTION)
    safety.text(f"The hand-over skill arm-release holds the arm still so that a person can take the part. {HANDOVER_NOTE}")
    safety.text(LIMITS_NOTE)
    return report.write(out / "report.html")
