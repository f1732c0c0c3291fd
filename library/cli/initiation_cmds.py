"""``kinetome learn-initiation``: propose a skill's ``starts_when`` from where it really succeeds."""

from __future__ import annotations

import argparse
from typing import Any

from .output import format_table, print_json
from .progress import Progress
from .run_cmds import JSON_HELP, add_task_options

__all__ = ["add_parsers", "format_learned"]

_EPILOG = (
    "The skill runs from every sampled start state whatever its starts_when says; an episode that ends by "
    "stops_when is a success. Precision = P(success | start in the region), recall = P(start in the region | "
    "success), both over the sampled initial states, measured on a report split the proposal was not fitted on. "
    "Exit codes: 0 a region was found, 1 no region meets the precision target (nothing stored), 2 bad input."
)


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    from ..safety import CAUTION

    p = sub.add_parser(
        "learn-initiation", parents=[common], help="propose a skill's starts_when from where it really succeeds",
        description=f"Learn where a skill succeeds and propose its starts_when. {CAUTION}", epilog=_EPILOG,
    )
    p.add_argument("ref", metavar="NAME[@N]", help="the skill (a name means its current version)")
    add_task_options(p)
    p.add_argument("--widen", action="append", metavar="QUANTITY=HALF_WIDTH",
                   help="add uniform noise of this half-width to a named quantity read straight from the state (qpos, qvel, "
                        "qvel[1], torso_height, ...); repeat for several; 'none' for none (default without --initial-states: "
                        "qpos=0.2 and qvel=0.5; with --initial-states: none)")
    p.add_argument("--episodes", type=int, default=3000, help="episodes to run, split 40/30/30 into fit, choose and report (default 3000)")
    p.add_argument("--precision", type=float, default=0.95,
                   help="precision the proposal must reach: the lower end of its exact interval on the report split (default 0.95)")
    p.add_argument("--confidence", type=float, default=0.95, help="coverage of the exact (Clopper-Pearson) intervals (default 0.95)")
    p.add_argument("--max-clauses", dest="max_clauses", type=int, default=4, help="most clauses in the proposal (default 4)")
    p.add_argument("--adopt", action="store_true",
                   help="store the proposal as a new version (lineage reason initiation-learned) current for this task")
    p.add_argument("--out", metavar="DIR", help="write result.json and initiation.png (start states and both boundaries) here")
    p.add_argument("--seed", type=int, default=0, help="seed of the initial states, widening and splits (default 0)")
    p.add_argument("--threads", type=int, default=1, metavar="N", help="MuJoCo threads in this process (default 1); results are identical")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_learn)


def _learn(args: argparse.Namespace) -> int:
    from ..api import learn_initiation, open_store

    store = open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None))
    quiet = bool(getattr(args, "quiet", False) or args.json)
    # the episodes run side by side, so progress counts time steps of the longest possible episode, not episodes
    with Progress(f"learn-initiation {args.ref} ({args.episodes} episodes stepped together)", unit="time steps", quiet=quiet) as bar:
        result = learn_initiation(
            args.ref, store=store, variant=args.variant, initial_states=args.initial_states, widen=args.widen,
            episodes=args.episodes, seed=args.seed, precision=args.precision, confidence=args.confidence,
            max_clauses=args.max_clauses, adopt=args.adopt, out=args.out, threads=args.threads,
            progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        print_json(result)
    else:
        print(format_learned(result))
    return 0


def _rate(r: dict | None) -> str:
    if r is None or not r["episodes"]:
        return "- (no episodes)"
    low, high = r["interval"]
    return f"{r['successes']}/{r['episodes']} = {r['rate']:.3f} [{low:.3f}, {high:.3f}]"


def _calibration_lines(result: dict) -> list[str]:
    c, k = result["calibration"], result["classifier"]
    compared = "; ".join(f"{m}: {('Brier %.4f on the choose split' % v['brier_choose']) if 'brier_choose' in v else v['skipped']}"
                         for m, v in k["compared"].items())
    features = f"{k['expansion']} features of " if k["model"] == "logistic" else ""
    lines = [f"classifier  {k['model']} on {features}{len(k['inputs'])} standardised inputs; compared: {compared}",
             f"calibration on the report split: Brier {c['brier']:.4f} (predicting the base rate: {c['brier_base_rate']:.4f})",
             "  reliability  " + ", ".join(f"{b['predicted']:.2f}->{b['observed']:.2f} (n {b['count']})" for b in c["reliability"])]
    return lines


def format_learned(result: dict[str, Any]) -> str:
    """The text ``kinetome learn-initiation`` prints."""
    level = f"{result['confidence']:.0%}"
    s = result["splits"]
    lines = [
        f"{result['skill']} on {result['env']}" + (f" with variant {result['variant']}" if result["variant"] else ""),
        f"  initial states  {result['initial_states']}, {result['widening_text']}",
        f"  episodes        {result['episodes']}: {result['successes']} stopped by stops_when "
        f"({', '.join(f'{k} {v}' for k, v in result['outcomes'].items())})",
        f"  splits          fit {s['fit']}, choose {s['choose']}, report {s['report']} (disjoint)",
        "",
    ]
    rows = [{"which": "proposed", "text": result["proposed"], "p": _rate(result["precision"]), "r": _rate(result["recall"])}]
    if result["current"] is not None:
        cur = result["current"]
        rows.append({"which": "current", "text": cur["starts_when"], "p": _rate(cur["precision"]), "r": _rate(cur["recall"])})
    lines.append(format_table(rows, [("which", ""), ("text", "STARTS_WHEN"), ("p", f"PRECISION (report, {level} exact)"),
                                     ("r", f"RECALL (report, {level} exact)")]))
    lines.append(f"precision target {result['precision_target']}: the proposal's lower bound "
                 f"{result['precision']['interval'][0]:.3f} meets it")
    if result["note"]:
        lines.append(f"note: {result['note']}")
    lines += ["", *_calibration_lines(result), ""]
    lines.append(f"evidence  {result['artifact']}")
    if result["adopted"]:
        a = result["adopted"]
        lines.append(f"adopted   {a['version']} (lineage reason initiation-learned), current for {a['current_for']}")
        lines.append(f"          starts_when {a['starts_when']}")
        lines.append("          kept from the current starts_when (quantities the proposal does not constrain): "
                     + ("; ".join(a["kept"]) if a["kept"] else "none"))
    else:
        lines.append("adopt it with --adopt (a new version; lineage reason initiation-learned)")
    if result.get("plot"):
        lines.append(f"plot      {result['plot']}")
    lines.append("Precision and recall hold for the sampled initial states only; the proposal says nothing about states outside them.")
    lines.append(result["caution"])
    return "\n".join(lines)
