"""Training commands: retrain (one skill on a changed task) and train (a set of skills as options)."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from .old_spellings import add_old_option
from .output import print_json, print_table
from .progress import Progress
from .run_cmds import JSON_HELP

__all__ = ["add_parsers"]


def _caution() -> str:
    from ..safety import CAUTION

    return CAUTION


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser(
        "retrain",
        parents=[common],
        help="retrain a stored skill on a task variant; stores a child version",
        description=(
            "Measure the skill on the variant, train, measure again and store the result as a child version with its "
            "lineage. The child becomes current for the variant, and for nominal, only where it is non-inferior to "
            "its parent on fresh episodes; its result on the parent's own task is always shown. " + _caution()
        ),
    )
    p.add_argument("ref", metavar="NAME[@N]", help="the version to start from (a name means its current version)")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--variant", metavar="FILE", help="task variant YAML to retrain on (payload, friction, ...; e.g. configs/variants/heavy_payload.yaml)")
    p.add_argument("--initial-states", dest="initial_states", metavar="FILE", help="initial-states YAML (e.g. configs/initial_states/arm_clearance.yaml; default: the skill's own, else the env's)")
    add_old_option(p, "--start", "--initial-states", dest="initial_states")
    which.add_argument("--variants", nargs="+", metavar="FILE",
                   help="retrain batch: one child per variant file, trained in parallel with --workers (Ray worker processes) "
                        "or --address; each child is stored with its lineage and promoted per variant; prints a table of the children "
                        "on their own variant and on nominal (use instead of --variant)")
    p.add_argument("--address", metavar="HOST:PORT", help="with --variants: train the children on the Ray cluster at this address")
    p.add_argument("--budget", type=int, dest="env_step_budget", metavar="STEPS", help="env steps of training in total (default: the config's env_step_budget)")
    add_old_option(p, "--steps", "--budget", dest="env_step_budget", type=int)
    p.add_argument("--deliberation-cost", type=float, dest="deliberation_cost", metavar="ETA",
                   help="refused unless 0: retraining runs one skill with no switches (options mode, `kinetome train`, charges it)")
    p.add_argument("--method", choices=("auto", "actor-critic", "search"), default="auto",
                   help="how to refine the skill: the actor-critic, or a search of its bounded parameters (CMA-ES); "
                        "auto (default) searches oscillator (cpg) skills and uses the actor-critic for the rest")
    p.add_argument("--seed", type=int, default=0, help="training and measurement seed (default 0)")
    p.add_argument("--from-scratch", action="store_true", help="re-initialise the parameters instead of starting from the stored values")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="with --variants: N Ray worker processes, one child each at a time (without --variants an old spelling of --threads)")
    p.add_argument("--threads", type=int, default=None, metavar="N", help="a single retrain: MuJoCo threads in this process (default 1)")
    p.add_argument("--config", metavar="FILE", help="training YAML (configs/training/); defaults suit PD/CPG skills")
    p.add_argument("--out", metavar="DIR", help="folder for the curve and checkpoints (default: a new ./kinetome-retrain/NAME-N/VARIANT/run-K per run)")
    p.add_argument("--resume", action="store_true", help="continue an interrupted run: the one in --out, else the newest unfinished run of this skill, variant and store (named before training)")
    p.add_argument("--promotion-episodes", type=int, metavar="N", help="fresh episodes per version and task for the promotion test (default 400)")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_retrain)

    p = sub.add_parser(
        "train",
        parents=[common],
        help="train stored skills together with a policy over them (deliberation cost)",
        description="Train the skills a training YAML lists as options on one task; stores refined child versions. " + _caution(),
    )
    p.add_argument("config", metavar="CONFIG.yaml", help="training YAML with skills: and task: (e.g. configs/training/options_small.yaml)")
    p.add_argument("--seed", type=int, help="training seed (default: the config's seed)")
    p.add_argument("--threads", type=int, default=1, metavar="N", help="MuJoCo threads in this process (default 1)")
    add_old_option(p, "--workers", "--threads", dest="threads", type=int)
    p.add_argument("--out", metavar="DIR", help="where curves and checkpoints go (default ./kinetome-train/CONFIG)")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_train)


def _bar(label: str, args: argparse.Namespace) -> tuple[Progress, Any]:
    """A progress display in env steps and the trainer callback that feeds it (rows of the learning curve)."""
    bar = Progress(label, unit="env steps", quiet=bool(getattr(args, "quiet", False) or args.json))

    def on_update(row: dict[str, Any]) -> None:
        bar.update(int(row["env_steps"]), total=int(row.get("total_steps") or 0) or None)

    return bar, on_update


def _metrics_row(label: str, m: dict[str, Any]) -> dict[str, Any]:
    from ..stored_meta import success_text

    return {"when": label, "success": success_text(m), "return": m["mean_return"], "duration": m["mean_duration"]}


def _say_run(run: Any, budget_note: str | None) -> None:
    """Name the run folder (and what is resumed) before training starts."""
    print(f"{'resuming' if run.resumed else 'writing to'} {run.folder}", file=sys.stderr)
    if budget_note:
        print(f"note: {budget_note}", file=sys.stderr)


def _retrain(args: argparse.Namespace) -> int:
    from ..api import open_store, retrain
    from ..errors import InvalidInputError

    if args.variants is not None:
        return _retrain_batch(args)
    if args.address is not None:
        raise InvalidInputError("--address applies to a batch (--variants); a single retrain runs in this process")
    threads = _single_retrain_threads(args)
    bar, on_update = _bar(f"retrain {args.ref}", args)
    result = retrain(
        args.ref,
        store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)),
        variant=args.variant,
        env_step_budget=args.env_step_budget,
        deliberation_cost=args.deliberation_cost,
        seed=args.seed,
        from_scratch=args.from_scratch,
        threads=threads,
        config=args.config,
        initial_states=args.initial_states,
        out=args.out,
        resume=args.resume,
        promotion_episodes=args.promotion_episodes,
        progress=on_update,
        on_run=_say_run if not args.json else None,
        method=args.method,
    )
    bar.close()
    if args.json:
        print_json(result)
        return 0
    print(f"{result['parent']} -> {result['child']} on {result['variant']} ({result['env_steps']} env steps, {result['wall_time_s']:.1f} s)")
    print_table([_metrics_row("before", result["before"]), _metrics_row("after", result["after"])], [("when", ""), ("success", "SUCCESS"), ("return", "MEAN RETURN"), ("duration", "MEAN DURATION (STEPS)")])
    _print_promotion(result)
    print(f"trainer   {result['trainer']} ({result['method_choice']})")
    print(f"lineage   {' <- '.join(result['lineage'])}")
    print(f"curve     {result['curve_csv']}  {result['curve_png']}")
    if result["models"]:
        print(f"models    {result['models']['model_ref']}")
    print(result["caution"])
    return 0


def _single_retrain_threads(args: argparse.Namespace) -> int:
    """MuJoCo threads of a single retrain: --threads, or --workers read as its old spelling (with a warning)."""
    import warnings

    from ..errors import InvalidInputError
    from ..renamed_keys import RenamedKeyWarning

    if args.workers is None:
        threads = 1 if args.threads is None else args.threads
    elif args.threads is not None:
        raise InvalidInputError("--workers without --variants is the old spelling of --threads; give only --threads N")
    else:
        warnings.warn(RenamedKeyWarning("'--workers' without --variants is an old spelling; write '--threads' instead "
                                        "(--workers N means Ray worker processes, for a batch)"), stacklevel=2)
        threads = args.workers
    return _at_least_one_thread(threads)


def _at_least_one_thread(threads: int) -> int:
    from ..errors import InvalidInputError

    if threads < 1:
        raise InvalidInputError(f"--threads must be at least 1 (MuJoCo threads in this process), got {threads}")
    return threads


def _retrain_batch(args: argparse.Namespace) -> int:
    from ..api import open_store
    from ..errors import InvalidInputError
    from ..lineage.batch import retrain_batch

    if args.resume or args.deliberation_cost or args.threads is not None:
        raise InvalidInputError("--resume, --deliberation-cost and --threads apply to a single retrain (--variant), not to a batch "
                                "(--variants; each child trains on one thread: use --workers N to run several at once)")
    def announce(count: int) -> None:  # only once the skill and every variant file have been read
        if not args.json:
            print(f"retraining {args.ref} on {count} variant{'s' if count != 1 else ''} ...", file=sys.stderr)

    result = retrain_batch(
        args.ref, store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)), variants=args.variants,
        initial_states=args.initial_states, config=args.config, env_step_budget=args.env_step_budget, seed=args.seed,
        from_scratch=args.from_scratch, method=args.method, promotion_episodes=args.promotion_episodes, workers=args.workers,
        address=args.address, out=args.out, on_start=announce,
    )
    if args.json:
        print_json(result)
        return 0
    print(format_batch(result))
    return 0


def format_batch(result: dict[str, Any]) -> str:
    """The comparison table of a retrain batch and each child's lineage."""
    from .output import format_table

    first = result["children"][0]["promotion"]
    lines = [
        f"retrained {result['skill']} on {len(result['children'])} variants ({result['workers']}); fresh episodes: "
        f"{first['episodes']} per version and task, current only if non-inferior (margin {first['margin']}, one-sided alpha {first['alpha']})",
        format_table(result["comparison"], [
            ("variant", "VARIANT"), ("child", "CHILD"), ("parent", "PARENT"), ("own_child", "CHILD ON ITS VARIANT"),
            ("own_parent", "PARENT ON IT"), ("own_bound", "LOWER BOUND"), ("nominal_child", "CHILD ON NOMINAL"),
            ("nominal_parent", "PARENT ON NOMINAL"), ("nominal_compared", "TESTED AGAINST ON NOMINAL"), ("nominal_bound", "LOWER BOUND"), ("current_for", "CURRENT FOR")]),
        "",
    ]
    lines += [f"lineage   {' <- '.join(c['lineage'])}  (trainer {c['trainer']}, {c['env_steps']} env steps)" for c in result["children"]]
    lines += [f"not current for {', '.join(c['passed_but_taken'])}: {c['child']} passed against the version current before the batch, "
              "but an earlier child of this batch became current there meanwhile (compare them, then kinetome promote)"
              for c in result["children"] if c.get("passed_but_taken")]
    if first.get("hint"):
        lines.append(f"hint      {first['hint']}")
    lines.append(result["caution"])
    return "\n".join(lines)


def _print_promotion(result: dict[str, Any]) -> None:
    """The promotion test on every task it ran on, and what became current."""
    from ..lineage.view import promotion_rows

    p = result["promotion"]
    print(f"\nfresh episodes ({p['episodes']} per version and task; current only if non-inferior, margin {p['margin']}, one-sided alpha {p['alpha']})")
    print_table(promotion_rows(p), [("task", "TASK"), ("roles", "ROLE"), ("parent", result["parent"]), ("child", result["child"]), ("compared", "TESTED AGAINST"), ("bound", "LOWER BOUND"), ("verdict", "VERDICT")])
    if p.get("hint"):
        print(f"hint      {p['hint']}")
    print(f"current   {result['child']} is current for {', '.join(result['current_for'])}" if result["current_for"] else f"current   {result['child']} is current for no task; promote it by hand with kinetome promote {result['child']} --task TASK")


def _train(args: argparse.Namespace) -> int:
    from ..api import open_store, train

    bar, on_update = _bar(f"train {args.config}", args)
    result = train(args.config, store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)), seed=args.seed, threads=_at_least_one_thread(args.threads), out=args.out, progress=on_update)
    bar.close()
    if args.json:
        print_json(result)
        return 0
    print(f"trained {', '.join(result['skills'])} as options ({result['env_steps']} env steps)")
    print(f"  stop rate            {result['stop_rate']:.4f} per step")
    print(f"  mean skill duration  {result['mean_skill_duration']:.1f} steps")
    print(f"  mean return          {result['mean_return']:.3f}")
    print(f"  children             {', '.join(result['children'])} (current for no task: compare them, then kinetome promote NAME@N --task TASK)")
    print(f"  curve                {result['curve_csv']}  {result['curve_png']}")
    print(result["caution"])
    return 0
