"""`kinetome demo`: the whole job on the invented workshop scenario, with a report.

Phases, each a small function: register the demo skills, fit their option
models from chain rollouts, check the demo chains, retrain the arm's reach
skill for a heavier payload, render filmstrips, and write ``report.html``.
Everything shown is computed in this run; nothing is canned.
"""

from __future__ import annotations

import json
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

from .output_schema import schema_name
from .safety import CAUTION, CAUTION_FOOTER
from .stored_meta import success_text

__all__ = ["DemoSettings", "run_demo", "configs_dir"]


@dataclass(frozen=True)
class DemoSettings:
    """Budgets of one demo run; ``quick`` is what CI runs."""

    quick: bool = False
    fit_episodes: int = 1000
    check_episodes: int = 2000
    retrain_config: str = "arm_heavy_payload.yaml"
    seed: int = 0
    threads: int = 2  # MuJoCo threads in this process
    sweep_payloads: tuple[float, ...] = (0.2, 0.4, 0.6, 0.8, 1.0)  # kg
    sweep_gains: tuple[float, ...] = (0.6, 0.7, 0.8, 0.9, 1.0)
    sweep_episodes: int = 100  # per cell
    sweep_require: float = 0.9

    @classmethod
    def for_mode(cls, quick: bool) -> "DemoSettings":
        if quick:
            return cls(quick=True, fit_episodes=400, check_episodes=600, retrain_config="demo_quick.yaml",
                       sweep_payloads=(0.2, 0.6, 1.0), sweep_gains=(0.8, 1.0), sweep_episodes=50)
        return cls()


@dataclass
class _Log:
    stream: TextIO
    quiet: bool = False
    started: float = field(default_factory=time.monotonic)

    def progress(self, label: str, unit: str = "steps") -> Any:
        """A progress display for one long phase, on the log's stream (off when quiet)."""
        from .cli.progress import Progress

        return Progress(label, unit=unit, stream=self.stream, quiet=self.quiet)

    def step(self, text: str) -> None:
        self.stream.write(f"[{time.monotonic() - self.started:6.1f} s] {text}\n")
        self.stream.flush()


def configs_dir() -> Path:
    """The project's configs/ folder (the demo runs from a source checkout)."""
    here = Path(__file__).resolve().parent.parent / "configs"
    if not (here / "skills").is_dir():
        from .errors import NotFoundError

        raise NotFoundError(f"demo configs not found at {here}; run the demo from a kinetome source checkout (pip install -e .)")
    return here


def _chain_inputs(path: Path, store: Any) -> tuple[Any, Any, list[Any]]:
    """(rig, initial-states distribution, loaded skills) of a chain file, resolved as the checker does."""
    from .checker import CheckOptions, load_chain, prepare_context

    ctx = prepare_context(load_chain(path, store=store), store=store, options=CheckOptions())
    return ctx.rig, ctx.start, list(ctx.skills)


def _register(store: Any, configs: Path, log: _Log) -> list[dict[str, Any]]:
    from .api import register

    rows = []
    for path in sorted((configs / "skills").glob("*.yaml")):
        result = register(path, store=store)
        rows.append({"ref": result.version.ref, "file": f"configs/skills/{path.name}", "is_new": result.is_new})
    log.step(f"registered {len(rows)} skills: {', '.join(r['ref'] for r in rows)}")
    return rows


def _fit_from_chains(store: Any, configs: Path, settings: DemoSettings, log: _Log) -> dict[str, dict[str, Any]]:
    """Fit each skill's option models from the end states it reaches inside the demo chains."""
    import numpy as np

    from kinetome.trainers.fitting import fit_option_models

    from .api import attach_models
    from .errors import InvalidInputError
    from .model_headlines import headlines
    from .runtime.execute import run_chain
    from .runtime.starts import sample_starts

    fitted: dict[str, dict[str, Any]] = {}
    for path in sorted((configs / "chains").glob("*.yaml")):
        rig, start, skills = _chain_inputs(path, store)
        starts = sample_starts(rig, start, settings.fit_episodes, seed=settings.seed)
        with log.progress(f"rollouts of {path.stem} for fitting") as bar:
            rollout = run_chain(
                skills, rig, starts=starts, seed=settings.seed, workers=settings.threads,
                progress=lambda done, total: bar.update(done, total=total),
            )
        for k, skill in enumerate(skills):
            if skill.ref in fitted:
                continue
            seg = rollout.segments[k]
            ran = int(np.sum(seg.steps > 0))
            try:
                models = fit_option_models(rollout, k, seed=settings.seed, envelope=rig.layout, skill_ref=skill.ref)
            except InvalidInputError as exc:  # too few episodes reached this skill: say so, do not stop the demo
                fitted[skill.ref] = {"skipped": f"{ran} episodes reached it in {path.name}: {str(exc).splitlines()[0]}"}
                continue
            summary = models.summary()
            record = attach_models(
                store, skill.ref, models, rig=rig, settings={"chain": path.name, "episodes": settings.fit_episodes, "seed": settings.seed},
                meta={"errors": summary, "episodes": ran, "chain": path.name, "seed": settings.seed, "env": rig.env_id},
            )
            fitted[skill.ref] = {"model": record.ref, "episodes": ran, "chain": path.name, "headlines": headlines(summary)}
    log.step(f"fitted option models for {sum('model' in v for v in fitted.values())} skills from chain rollouts")
    return fitted


def _check_chains(store: Any, configs: Path, out: Path, settings: DemoSettings, log: _Log) -> list[dict[str, Any]]:
    from .api import check_chain

    results = []
    for path in sorted((configs / "chains").glob("*.yaml")):
        report_dir = out / "chains" / path.stem
        with log.progress(f"checking {path.stem}", unit="episodes") as bar:
            result = check_chain(
                path, store=store, method="auto", episodes=settings.check_episodes, seed=settings.seed,
                threads=settings.threads, out=report_dir, progress=lambda done, total: bar.update(done, total=total),
            )
        data = result.to_dict()
        results.append({"file": f"configs/chains/{path.name}", "name": path.stem, "result": data, "text": result.format_text(), "report_dir": report_dir, "exit_code": result.exit_code})
        verdicts = ", ".join(f"{h['from']} -> {h['to']}: {h['verdict']} ({h['decided_by']})" for h in data["handoffs"] if h["kind"] == "handoff")
        log.step(f"checked {path.name}: {verdicts or data.get('summary', '')}")
    return results


def _plan(store: Any, configs: Path, out: Path, settings: DemoSettings, log: _Log) -> dict[str, Any]:
    from .planning.demo_plan import demo_plan

    planned = demo_plan(store, configs, out, quick=settings.quick, seed=settings.seed, threads=settings.threads)
    log.step(f"plan: found {' -> '.join(planned['winner']) or 'no chain'} for the goal {planned['goal']} (listed {', '.join(planned['listed'])}; chosen by the search {', '.join(planned['chosen_by_search']) or 'nothing'})")
    return planned


def _retrain(store: Any, configs: Path, out: Path, settings: DemoSettings, log: _Log) -> dict[str, Any]:
    from .api import retrain

    variant = configs / "variants" / "heavy_payload.yaml"
    bar = log.progress("retraining arm-reach-tray", unit="env steps")

    def on_update(row: dict[str, Any]) -> None:
        bar.update(int(row["env_steps"]), total=int(row.get("total_steps") or 0) or None)

    result = retrain(
        "arm-reach-tray",
        store=store,
        variant=variant,
        config=configs / "training" / settings.retrain_config,
        initial_states=configs / "initial_states" / "arm_clearance.yaml",  # where arm-lift hands over
        seed=settings.seed,
        threads=settings.threads,
        out=out / "retrain",
        refit_episodes=settings.fit_episodes,
        progress=on_update,
    )
    bar.close()
    b, a = result["before"], result["after"]
    log.step(f"retrained {result['parent']} -> {result['child']} on heavy_payload: success {success_text(b)} -> {success_text(a)}, return {b['mean_return']:.2f} -> {a['mean_return']:.2f}; lineage {' <- '.join(result['lineage'])}; current for {', '.join(result['current_for']) or 'no task'}")
    return result


def _learn_initiation(store: Any, out: Path, settings: DemoSettings, log: _Log) -> dict[str, Any]:
    """Where walker-stand really succeeds, against its hand-written starts_when (not adopted)."""
    from .api import learn_initiation
    from .errors import NoRegionFoundError

    episodes = 2000 if settings.quick else 4000
    with log.progress(f"learning where walker-stand works ({episodes} episodes)") as bar:
        try:
            result = learn_initiation("walker-stand", store=store, widen=["torso_pitch=0.5", "qvel=0.5"], episodes=episodes, precision=0.9,
                                      seed=settings.seed, out=out / "initiation", threads=settings.threads,
                                      progress=lambda d, t: bar.update(d, total=t))
        except NoRegionFoundError as exc:
            log.step(str(exc))
            return {"no_region": str(exc)}
    p = result["precision"]
    log.step(f"learned walker-stand's starts_when: {result['proposed']} (precision {p['successes']}/{p['episodes']}, "
             f"lower bound {p['interval'][0]:.3f}); hand-written: {result['current']['starts_when']}")
    return result


def _sweeps(store: Any, configs: Path, out: Path, settings: DemoSettings, retrained: dict[str, Any], log: _Log) -> list[dict[str, Any]]:
    """The reach skill over payload x motor gain, before (the parent) and after (the heavy-payload child) the retrain."""
    from .api import sweep

    axes = [f"payload_mass={','.join(f'{v:g}' for v in settings.sweep_payloads)}",
            f"actuator_gain={','.join(f'{v:g}' for v in settings.sweep_gains)}"]
    results = []
    for label, ref in (("before", retrained["parent"]), ("after", retrained["child"])):
        result = sweep(ref, store=store, axes=axes, episodes=settings.sweep_episodes, require=settings.sweep_require, seed=settings.seed,
                       initial_states=configs / "initial_states" / "arm_clearance.yaml", out=out / "sweeps" / label)
        region = result["region"]
        log.step(f"swept {ref} ({label} the retrain) over payload x motor gain: {len(region['cells'])} of {region['cells_evaluated']} cells in its valid-for region")
        results.append({"label": label, "ref": ref, "result": result})
    return results


def _filmstrips(store: Any, configs: Path, out: Path, settings: DemoSettings, log: _Log) -> dict[str, dict[str, Any]]:
    """One traced episode per chain as a labelled filmstrip: {chain: {"path", "renderer", "frames"}}."""
    from .report.filmstrip import chain_filmstrip
    from .runtime.execute import run_chain
    from .runtime.starts import sample_starts

    strips: dict[str, dict[str, Any]] = {}
    for path in sorted((configs / "chains").glob("*.yaml")):
        rig, start, skills = _chain_inputs(path, store)
        rollout = run_chain(skills, rig, starts=sample_starts(rig, start, 1, seed=settings.seed), seed=settings.seed, trace=1)
        strips[path.stem] = chain_filmstrip(
            rig, rollout.qpos_trace[0], rollout.segment_of_step[0], [s.ref for s in skills],
            out / f"filmstrip-{path.stem}.png", footer=CAUTION_FOOTER,
        )
    drawn_by = sorted({s["renderer"] for s in strips.values()})
    log.step(f"rendered {len(strips)} filmstrips ({', '.join(drawn_by) or 'none'})")
    return strips


def run_demo(
    out_dir: str | Path, *, store_dir: str | Path | None = None, quick: bool = False, stream: TextIO | None = None,
    quiet: bool = False,
) -> dict[str, Any]:
    """Run every phase and write ``out_dir/report.html`` plus PNGs and ``demo.json``;
    ``quiet`` hides the progress bars and lines (the phase log stays)."""
    from .api import open_store
    from .report.demo_report import write_demo_report

    settings = DemoSettings.for_mode(quick)
    log = _Log(stream or sys.stdout, quiet=quiet)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    store = open_store(store_dir if store_dir is not None else out / "store")
    configs = configs_dir()
    log.step(f"kinetome demo ({'quick' if quick else 'full'}): store {store.location}, output {out}")
    registered = _register(store, configs, log)
    fitted = _fit_from_chains(store, configs, settings, log)
    checks = _check_chains(store, configs, out, settings, log)
    planned = _plan(store, configs, out, settings, log)
    retrained = _retrain(store, configs, out, settings, log)
    learned = _learn_initiation(store, out, settings, log)
    sweeps = _sweeps(store, configs, out, settings, retrained, log)
    strips = _filmstrips(store, configs, out, settings, log)
    summary = {
        "schema": schema_name("demo"),
        "caution": CAUTION,
        "quick": quick,
        "seconds": round(time.monotonic() - log.started, 1),
        "store": store.location,
        "registered": registered,
        "models": fitted,
        "checks": [{k: v for k, v in c.items() if k not in ("report_dir",)} for c in checks],
        "plan": planned,
        "retrain": retrained,
        "initiation": learned,
        "sweeps": sweeps,
        "filmstrips": {k: {**v, "path": str(v["path"])} for k, v in strips.items()},
    }
    (out / "demo.json").write_text(json.dumps(summary, indent=2, sort_keys=True, default=str), encoding="utf-8")
    report = write_demo_report(out, store=store, summary=summary, checks=checks, strips=strips)
    log.step(f"report written: {report}")
    log.step(CAUTION)
    return summary
