"""The demo's planning phase: the search finds the workshop's pick-and-place chain from the whole library.

The user names only the goal (the part settled within 2 cm of the tray) and the first
skill (lift the part off its fixture); the search picks the rest from every stored
skill of the bench arm, including the settling skill arm-place, and confirms the best
candidates in simulation. Everything shown is computed in this run.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

__all__ = ["SETTLED_GOAL", "LISTED", "demo_plan"]

SETTLED_GOAL = "norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.02"
LISTED = ("arm-lift",)


def demo_plan(store: Any, configs: Path, out: Path, *, quick: bool, seed: int, threads: int) -> dict[str, Any]:
    """Run ``plan_chain`` on the demo store; the summary the report and demo.json show."""
    from ..api import plan_chain

    result = plan_chain(
        env="kinetome/BenchArm-v0", goal=SETTLED_GOAL, store=store, initial_states=configs / "initial_states" / "arm_home.yaml",
        begin_with=list(LISTED), max_length=4, top=2 if quick else 3, particles=100 if quick else 200,
        episodes=200, seed=seed, threads=threads, name="pick-and-place-found", out=out / "plan",
    )
    winner = list(result.winner.chain.skills) if result.winner is not None else []
    data = result.to_dict()
    return {
        "goal": SETTLED_GOAL,
        "listed": list(LISTED),
        "winner": winner,
        "chosen_by_search": [ref for ref in winner if ref.split("@")[0] not in LISTED],
        "descriptions": {ref: store.get(ref).meta.get("description", "") for ref in winner},
        "exit_code": result.exit_code,
        "search": data["search"],
        "skills": data["skills"],
        "confirmed": data["confirmed"],
        "chain_file": data["chain_file"],
        "text": result.format_text(),
    }
