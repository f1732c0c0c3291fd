"""Human-readable output of `kinetome plan`: candidates, their checks, the winner, or the closest failure."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from ..checker.text import table

__all__ = ["plan_text"]


def _f(x: float | None, digits: int = 3) -> str:
    return "-" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.{digits}f}"


def _chain(skills: Any) -> str:
    return " -> ".join(skills)


def _head(r: Any) -> list[str]:
    t, s = r.task, r.search
    init = t.initial_states.name if isinstance(t.initial_states, Path) else ("inline" if t.initial_states else "the robot's default")
    lines = [f"plan on {t.env}" + (f" with variant {t.variant.name}" if t.variant else "") + f", initial states {init}", f"goal: {t.goal}"]
    if t.begin_with:
        lines.append(f"must begin with: {', '.join(t.begin_with)}")
    lines.append(f"candidate skills ({len(r.skills)}), scored by:")
    lines += [f"  {ref}: {how}" for ref, how in r.skills.items()]
    state = "searched every sequence that could still win" if s.complete else "stopped by the time budget (best found so far)"
    lines.append(
        f"search: {s.scored} sequences scored in {s.seconds:.1f} s ({s.scored_per_second:.1f} per second), "
        f"{s.pruned} handoffs pruned by proofs or stored check results, up to {r.settings.max_length} skills; {state}"
    )
    return lines


def _verdict(i: int, c: Any, winner: Any) -> str:
    if c is winner:
        return "chosen"
    if c.failure:
        return f"rejected: {c.failure}"
    return f"rejected: composes, ranked below the winner (lower bound {c.lower:.3f} vs {winner.lower:.3f}, mean duration {_f(c.duration, 1)} vs {_f(winner.duration, 1)} steps)"


def _candidates(r: Any) -> list[str]:
    rows = []
    winner = r.winner
    for i, c in enumerate(r.confirmations, 1):
        p = c.candidate
        rows.append([
            str(i), _chain(c.chain.skills), f"{p.success:.3f} +- {p.stated_error:.3f}", _f(p.steps, 1), p.goal.status,
            f"{c.goal_successes}/{c.episodes}", _f(c.lower), _f(c.duration, 1),
        ])
    lines = ["", *table(["#", "chain", "predicted success", "expected steps", "goal", "measured", "lower", "mean steps"], rows, right={0, 3, 5, 6, 7})]
    lines.append("")
    for i, c in enumerate(r.confirmations, 1):
        lines.append(f"{i} {_chain(c.chain.skills)}: {_verdict(i, c, winner)}")
    return lines


def _no_chain(r: Any) -> list[str]:
    s = r.search
    lines = ["", f"no chain found: no sequence of up to {r.settings.max_length} stored skills reaches the goal"
             + ("" if s.complete else " within the time budget")]
    f = s.closest
    if f is not None:
        shown = _chain(f.skills) if f.skills else "(none: no skill accepts the initial states)"
        lines.append(f"closest candidate: {shown} (predicted success up to the failing handoff {f.success_before:.3f})")
        lines.append(f"  failing handoff {f.link[0]} -> {f.link[1]}: {f.reason}")
    return lines


def plan_text(r: Any) -> str:
    from .plan import EXIT_TEXT

    lines = _head(r)
    if r.confirmations:
        lines += _candidates(r)
    else:
        lines += _no_chain(r)
    if r.winner is not None:
        w = r.winner
        lines += ["", f"chosen: {_chain(w.chain.skills)}"]
        if r.chain_file is not None:
            lines.append(f"chain file: {r.chain_file} (check it again with: kinetome check {r.chain_file})")
            lines.append(f"winner's check report: {r.report_dir}")
        lines += ["", "check of the chosen chain:", w.result.format_text()]
    elif r.confirmations:
        lines += ["", "no candidate passed its check; each is explained by its first failing handoff above"]
    if r.stored:
        lines.append(f"check results kept as evidence (later plans on this task skip handoffs they found broken): {', '.join(r.stored)}")
    if r.winner is None:  # the winner's check text already carries the caution
        lines += ["", r.caution]
    lines += ["", f"exit code {r.exit_code}: {EXIT_TEXT[r.exit_code]}"]
    return "\n".join(lines)
