"""The demo report's chain-search section: goal, candidates with predicted and measured success, the winner."""

from __future__ import annotations

from typing import Any

from .html import Report, table_html

__all__ = ["plan_section"]


def _f(x: Any, digits: int = 3) -> str:
    return "-" if x is None else f"{x:.{digits}f}"


def plan_section(report: Report, plan: dict[str, Any]) -> None:
    s = report.section("plan", "Finding a chain: search the library for one that reaches a goal")
    listed = ", ".join(plan["listed"]) or "nothing"
    s.text(
        f"The engineer gives a goal, {plan['goal']} (the part settled over the tray), and lists only the first skill ({listed}). "
        "The search tries the stored skills of the bench arm best first: proofs over the regions rule out handoffs that cannot meet, option "
        "models fitted on this task score the rest (simulation where there are none), and the best candidates are checked in "
        "simulation and ranked by the lower bound of measured whole-chain success, then duration."
    )
    search = plan["search"]
    s.text(f"{search['scored']} sequences scored in {search['seconds']:.1f} s; {search['pruned']} handoffs pruned.")
    if plan["winner"]:
        added = "; ".join(f"{ref} ({plan['descriptions'].get(ref, '')})" for ref in plan["chosen_by_search"])
        s.text(f"Found: {' -> '.join(plan['winner'])}. Added by the search, not listed by the engineer: {added}.")
    else:
        s.text("No chain found (see the output below).")
    rows = [
        {
            "chain": " -> ".join(c["skills"]),
            "predicted": f"{c['predicted']['predicted_success']:.3f} +- {c['predicted']['stated_error']:.3f}",
            "measured": f"{c['goal_successes']}/{c['episodes']}",
            "lower": _f(c["lower_bound"]),
            "steps": _f(c["mean_duration_steps"], 1),
            "verdict": "composes" if c["failure"] is None else "breaks",
            "why": c["failure"] or ("chosen" if c["skills"] == plan["winner"] else "ranked below the winner"),
        }
        for c in plan["confirmed"]
    ]
    if rows:
        s.add(table_html(rows, [("chain", "Candidate"), ("predicted", "Predicted success"), ("measured", "Measured"), ("lower", "Lower bound"),
                                ("steps", "Mean steps"), ("verdict", "Check"), ("why", "Outcome")], classes={"verdict": "verdict"}))
    scored = [{"skill": r["ref"], "scored_by": r["scored_by"]} for r in plan["skills"]]
    s.add(table_html(scored, [("skill", "Skill"), ("scored_by", "Scored by")]))
    s.add("<details><summary>Full kinetome plan output</summary>")
    s.pre(plan["text"])
    s.add("</details>")
