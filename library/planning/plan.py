"""`kinetome plan` end to end: build the problem, search, confirm, write the chain file and the winner's report."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..output_schema import tagged
from .confirm import ChainSettings, Confirmation, chain_yaml, confirm_candidates
from .library_problem import PlanTask, build_problem
from .search import SearchResult, SearchSettings, search_chains

__all__ = ["PlanResult", "run_plan", "EXIT_TEXT"]

EXIT_TEXT = {
    0: "a chain was found and its check composes and meets the requirement",
    1: "no chain found, or no candidate passed its check",
}


@dataclass(frozen=True, eq=False)
class PlanResult:
    """Everything one plan found: the search, the confirmations (winner first), the files written."""

    task: PlanTask
    search: SearchResult
    settings: SearchSettings
    confirmations: tuple[Confirmation, ...]
    skills: dict[str, str]  # ref -> how the search scored it
    chain_file: Path | None
    report_dir: Path | None
    caution: str
    stored: tuple[str, ...] = ()
    notes: tuple[str, ...] = field(default=())

    @property
    def winner(self) -> Confirmation | None:
        first = self.confirmations[0] if self.confirmations else None
        return first if first is not None and first.passed else None

    @property
    def exit_code(self) -> int:
        return 0 if self.winner is not None else 1

    def to_dict(self) -> dict[str, Any]:
        s = self.search
        closest = s.closest.to_dict() if s.closest is not None else None
        init = self.task.initial_states
        return tagged("plan", {
            "task": {"env": self.task.env, "variant": None if self.task.variant is None else str(self.task.variant),
                     "initial_states": str(init) if isinstance(init, Path) else init, "goal": self.task.goal},
            "limits": {"max_length": self.settings.max_length, "time_budget_s": self.settings.time_budget_s, "top": self.settings.top},
            "skills": [{"ref": r, "scored_by": how} for r, how in self.skills.items()],
            "begin_with": list(self.task.begin_with),
            "search": {"scored": s.scored, "pruned": s.pruned, "seconds": s.seconds, "scored_per_second": _finite(s.scored_per_second),
                       "complete": s.complete, "candidates": [c.to_dict() for c in s.candidates], "closest": closest},
            "confirmed": [c.to_dict() for c in self.confirmations],
            "winner": None if self.winner is None else list(self.winner.chain.skills),
            "chain_file": None if self.chain_file is None else str(self.chain_file),
            "report_dir": None if self.report_dir is None else str(self.report_dir),
            "stored_check_results": list(self.stored),
            "exit_code": self.exit_code,
            "caution": self.caution,
        })

    def format_text(self) -> str:
        from .plan_text import plan_text

        return plan_text(self)


def _finite(x: float) -> float | None:
    return x if math.isfinite(x) else None


def _scored_by(lp: Any) -> dict[str, str]:
    out = {}
    for ref, skill in lp.skills.items():
        if skill.models is not None:
            out[ref] = f"option models {skill.models.artifact} (starts outside their support count as failures)"
        else:
            out[ref] = f"simulation ({skill.why_no_models or 'no option models fitted on this task'})"
    return out


def _stored(confirmations: list[Confirmation]) -> tuple[str, ...]:
    """Where each check is kept as evidence (kind check-result), reused or fresh."""
    out = []
    for c in confirmations:
        about = c.result.to_dict().get("stored") or {}
        if about.get("artifact"):
            out.append(f"{about['artifact']} ({'reused' if about.get('reused') else 'stored'})")
    return tuple(out)


def _write(out: Path, winner: Confirmation, goal: str) -> tuple[Path, Path]:
    from ..report.checker_plots import write_report

    out.mkdir(parents=True, exist_ok=True)
    chain_file = out / f"{winner.chain.name}.yaml"
    chain_file.write_text(chain_yaml(winner.chain, goal, chain_file), encoding="utf-8")
    report = out / "check"
    write_report(winner.result, report)
    return chain_file, report


def run_plan(
    store: Any, task: PlanTask, *, search: SearchSettings, chain: ChainSettings, particles: int = 200,
    threads: int = 1, out: str | Path | None = None, progress: Any = None,
) -> PlanResult:
    """Search the library for chains that reach ``task.goal``, confirm the best ones, write the winner."""
    from ..safety import caution_for

    lp = build_problem(store, task, particles=particles, seed=chain.seed, confidence=chain.confidence)
    found = search_chains(lp.problem, search)
    confirmations = confirm_candidates(store, list(found.candidates), task, lp.goal, chain, threads=threads, progress=progress)
    stored = _stored(confirmations)
    chain_file = report = None
    winner = confirmations[0] if confirmations and confirmations[0].passed else None
    if winner is not None and out is not None:
        chain_file, report = _write(Path(out), winner, task.goal)
    result = PlanResult(task, found, search, tuple(confirmations), _scored_by(lp), chain_file, report, caution_for(lp.rig), stored)
    if out is not None:
        Path(out).mkdir(parents=True, exist_ok=True)
        (Path(out) / "plan.json").write_text(json.dumps(result.to_dict(), indent=2, sort_keys=True, default=str) + "\n", encoding="utf-8")
        (Path(out) / "plan.txt").write_text(result.format_text() + "\n", encoding="utf-8")
    return result
