"""`kinetome plan`: search the library for a chain of skills that reaches a goal, and check it."""

from __future__ import annotations

import argparse
from typing import Any

from ..safety import CAUTION

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser(
        "plan",
        parents=[common],
        help="find a chain of stored skills that reaches a goal, check the best candidates, write the winner as a chain file (exit 0 found, 1 none, 2 bad input)",
        description=(
            "Best-first search over the stored skills of the env's robot (current versions for the task, or the ones "
            "listed): the first skill must accept the initial states, each handoff must compose and the last stop region "
            "must reach the goal (proved where the predicates allow, else measured). Candidates are scored by option "
            "models fitted on this task (starts outside their support count as failures), by simulation where there are none; the best are checked in simulation "
            "(kinetome check's method auto) and ranked by the lower bound of measured whole-chain success, then duration. "
            + CAUTION
        ),
    )
    p.add_argument("--env", required=True, help="the env the chain runs on, e.g. kinetome/BenchArm-v0")
    p.add_argument("--variant", metavar="FILE", help="task variant file (default: nominal)")
    p.add_argument("--initial-states", metavar="FILE", help="initial-states file (default: the robot's own)")
    p.add_argument("--goal", required=True, metavar="PREDICATE", help="goal region over named state, e.g. 'norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.02'")
    p.add_argument("--max-length", type=int, default=4, help="most skills in a chain (default 4)")
    p.add_argument("--time-budget", type=float, default=120.0, metavar="SECONDS", help="search time budget in seconds (default 120); the best found so far is confirmed when it runs out")
    p.add_argument("--skills", nargs="+", metavar="REF", help="candidate skills (name: current for the task; name@N: pinned); default every stored skill of the robot")
    p.add_argument("--begin-with", nargs="+", metavar="REF", default=[], help="skills every chain must start with, in order (the search adds the rest)")
    p.add_argument("--top", type=int, default=3, help="candidates to check in simulation (default 3)")
    p.add_argument("--particles", type=int, default=200, help="start states carried through each candidate while scoring (default 200)")
    p.add_argument("--episodes", type=int, default=200, help="simulation budget of each candidate's check (default 200; method auto stops early)")
    p.add_argument("--require", type=float, default=0.95, help="required success probability of every handoff and of the whole chain (default 0.95)")
    p.add_argument("--confidence", type=float, default=0.95, help="confidence of every bound (default 0.95)")
    p.add_argument("--seed", type=int, default=0, help="seed of the particles and of the checks (default 0)")
    p.add_argument("--name", default="planned-chain", help="name of the chain file written (default planned-chain)")
    p.add_argument("--threads", type=int, default=1, help="MuJoCo threads per block of episodes in this process (results do not depend on it)")
    p.add_argument("--out", metavar="DIR", default="kinetome-plan", help="folder for the chain file, plan.txt/plan.json and the winner's check report (default kinetome-plan)")
    p.add_argument("--json", action="store_true", help="print the result as JSON (schema kinetome.plan/1)")
    p.set_defaults(handler=_plan)


def _plan(args: argparse.Namespace) -> int:
    from ..api import open_store, plan_chain
    from .progress import Progress

    quiet = bool(getattr(args, "quiet", False) or args.json)
    with Progress("checking candidates", unit="episodes", quiet=quiet) as bar:
        result = plan_chain(
            env=args.env, goal=args.goal, store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)),
            variant=args.variant, initial_states=args.initial_states, max_length=args.max_length, time_budget=args.time_budget,
            skills=args.skills, begin_with=args.begin_with, top=args.top, particles=args.particles, episodes=args.episodes,
            require=args.require, confidence=args.confidence, seed=args.seed, name=args.name, threads=args.threads, out=args.out,
            progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        from .output import print_json

        print_json(result.to_dict())
    else:
        print(result.format_text())
    return result.exit_code
