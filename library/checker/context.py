"""Everything one check works on: options, the chain's rig, loaded skills, start distribution, caches."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..errors import InvalidInputError, KinetomeError, Problem
from .chain import Chain, skill_is_spec_file
from .evidence import Handoff
from .sequential import DEFAULT_BLOCK

__all__ = ["CheckOptions", "CheckContext", "prepare_context"]


@dataclass(frozen=True)
class CheckOptions:
    """How to check. ``episodes``/``seed`` default to the chain file's values.

    ``fail_on_gaps``: contract gaps (states A may stop in that B refuses, never reached in
    simulation) break the handoff. ``fail_on_limits``: a declared limit of A exceeded in
    simulation, or a command jump at the switch above ``handoff_limits.command_jump``, breaks it.
    ``start_samples``: initial states drawn to test the entry; ``model_samples``:
    particles for the model method; ``timeout_ms``: per z3 query; ``workers``/``address``/``threads``:
    where simulation blocks run (never what they compute); ``block_size``:
    episodes per simulation block (results do not depend on it for ``--method sim``
    beyond which initial states are drawn; stopping rules look only at block ends).
    """

    method: str = "auto"
    episodes: int | None = None
    seed: int | None = None
    workers: int | None = None  # Ray worker processes for simulation blocks (None: this process)
    address: str | None = None  # a running Ray cluster for them
    threads: int = 1  # MuJoCo threads per block in this process
    gamma: float = 0.99
    timeout_ms: int = 10_000
    start_samples: int = 1000
    model_samples: int = 2000
    max_counterexamples: int = 5
    block_size: int = DEFAULT_BLOCK
    fail_on_gaps: bool = False  # a contract gap breaks its handoff
    fail_on_limits: bool = False  # a declared limit exceeded, or a command jump over the chain's bound, breaks it
    progress: Any = field(default=None, compare=False)  # progress(done, total) in episodes while simulating

    def __post_init__(self) -> None:
        problems = []

        def count(name: str, low: int, allow_none: bool = False) -> None:
            value = getattr(self, name)
            if allow_none and value is None:
                return
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                problems.append(Problem("<options>", None, name, f"must be a whole number >= {low}, got {value!r}"))

        count("episodes", 1, allow_none=True)
        count("seed", 0, allow_none=True)
        count("workers", 1, allow_none=True)
        count("threads", 1)
        if self.address is not None and (not isinstance(self.address, str) or not self.address.strip()):
            problems.append(Problem("<options>", None, "address", f"must be a Ray cluster address such as 127.0.0.1:6379, got {self.address!r}"))
        if not problems and self.threads > 1 and (self.address is not None or (self.workers or 1) > 1):
            problems.append(Problem("<options>", None, "threads", f"applies to a run in this process, got {self.threads} with worker processes",
                                    "drop --threads (each worker process runs one thread), or drop --workers/--address"))
        count("timeout_ms", 1)
        count("start_samples", 1)
        count("model_samples", 1)
        count("max_counterexamples", 0)
        count("block_size", 1)
        if not (isinstance(self.gamma, (int, float)) and 0.0 < self.gamma <= 1.0):
            problems.append(Problem("<options>", None, "gamma", f"must be in (0, 1], got {self.gamma!r}"))
        from .registry import AUTO, method_names

        known = [AUTO, *method_names()]
        if self.method not in known:
            import difflib

            close = difflib.get_close_matches(str(self.method), known, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            problems.append(Problem("<options>", None, "method", f"must be one of {', '.join(known)}, got {self.method!r}", hint.strip()))
        if problems:
            raise InvalidInputError(problems)


@dataclass(eq=False)
class CheckContext:
    """Resolved inputs of one check plus per-run caches (models, rollout, start states)."""

    chain: Chain
    options: CheckOptions
    rig: Any
    skills: tuple[Any, ...]  # LoadedSkill, built for the chain's rig
    skill_envs: tuple[str, ...]  # each skill's own env id (its spec's env)
    start: Any  # StartDistribution of the initial states, or None (the robot's default)
    store: Any = None
    cache: dict[str, Any] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    chain_stats: Any = None  # filled by the simulation method
    built_for: tuple[str, ...] = ()  # per skill, the env whose rig it was built for (workers rebuild it the same way)

    @property
    def episodes(self) -> int:
        return self.options.episodes if self.options.episodes is not None else self.chain.episodes

    @property
    def seed(self) -> int:
        return self.options.seed if self.options.seed is not None else self.chain.seed

    @property
    def layout(self) -> Any:
        return self.rig.layout

    def all_handoffs(self) -> list[Handoff]:
        refs = [s.ref for s in self.skills]
        out = [Handoff(0, "initial states", refs[0])]
        out += [Handoff(j, refs[j - 1], refs[j]) for j in range(1, len(refs))]
        return out

    def source_skill(self, j: Handoff) -> Any:
        return None if j.is_entry else self.skills[j.index - 1]

    def target_skill(self, j: Handoff) -> Any:
        return self.skills[j.index]

    def named_state(self, qpos: np.ndarray, qvel: np.ndarray, *, chunk: int = 256) -> dict[str, np.ndarray]:
        """Named state of raw states, computed by MuJoCo in chunks (reset, write, forward)."""
        from ..runtime.starts import named_state_of_states

        qpos, qvel = np.atleast_2d(qpos), np.atleast_2d(qvel)
        parts = [named_state_of_states(self.rig, qpos[i : i + chunk], qvel[i : i + chunk]) for i in range(0, qpos.shape[0], chunk)]
        return {k: np.concatenate([p[k] for p in parts], axis=0) for k in parts[0] if not k.endswith("_jac")}

    def block_starts(self, first: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
        """Initial states of episodes first..stop-1: their own stream, whatever runs the block."""
        return self.start_states(stop - first, seed=(self.seed, 3, first, stop))

    def start_states(self, n: int, *, seed: int | tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
        key = f"starts:{n}:{seed}"
        if key not in self.cache:
            from ..runtime.starts import sample_starts

            try:
                self.cache[key] = sample_starts(self.rig, self.start, n, seed=list(seed) if isinstance(seed, tuple) else seed)
            except KinetomeError:
                raise
            except Exception as exc:  # envs raises EnvConfigError (a ValueError) for bad constraints
                raise InvalidInputError(
                    [self.chain.problem("task.initial_states", f"cannot sample initial states: {exc}", "fix the initial states")]
                ) from None
        return self.cache[key]


def _load_step(step: str, store: Any, rig: Any, spec: Any) -> Any:
    """The step built for ``rig``; ``spec``: a spec-file step's spec, already read (None for a stored skill)."""
    from ..runtime.skill import load_skill, skill_from_spec

    if spec is not None:
        return skill_from_spec(spec, ref=Path(step).name, rig=rig)
    return load_skill(store, step, rig=rig)


def _spec_env(step: str, store: Any, spec: Any) -> str:
    """The env a step's spec names, without building its controller (``spec`` as for ``_load_step``)."""
    import json

    if spec is not None:
        return spec.env
    from ..runtime.skill import SPEC_FILE

    doc = json.loads(store.read_file(store.get(step), SPEC_FILE).decode("utf-8"))
    return str(doc.get("env", ""))


def prepare_context(chain: Chain, *, store: Any, options: CheckOptions) -> CheckContext:
    """Build the chain's rig (variant applied), its start distribution and every skill.

    Skills are built for the chain's rig. A skill whose own env is another robot
    (or has another number of actuators) is built for its own env instead; the
    structural check then reports the mismatch as ``breaks``.
    """
    from ..spec_load import load_spec
    from ..tasks import load_start_file, load_variant_file, task_rig
    from .chain import resolve_skills

    if any(not skill_is_spec_file(s) for s in chain.skills):
        if store is None:
            raise InvalidInputError([chain.problem("skills", "names stored skills but no store was given", "pass --store or set KINETOME_STORE")])
        resolve_skills(chain, store)
    variant = load_variant_file(chain.variant) if chain.variant is not None else None
    rig = task_rig(chain.env, variant)
    if isinstance(chain.initial_states, Path):
        start = load_start_file(chain.initial_states)
    elif isinstance(chain.initial_states, Mapping):
        from kinetome.envs import EnvConfigError
        from kinetome.envs.starts import start_from_mapping

        try:
            start = start_from_mapping(chain.initial_states, source=f"{chain.source}:task.initial_states")
        except EnvConfigError as exc:
            raise InvalidInputError([chain.problem("task.initial_states", line) for line in exc.problems]) from None
    else:
        start = None
    skills, envs, built_for = [], [], []
    own_rigs: dict[str, Any] = {rig.env_id: rig}
    for step in chain.skills:
        spec = load_spec(step) if skill_is_spec_file(step) else None  # read and validated once per step
        env = _spec_env(step, store, spec)
        envs.append(env)
        if env not in own_rigs:
            own_rigs[env] = task_rig(env)
        own = own_rigs[env]
        fits = own.metadata.get("robot") == rig.metadata.get("robot") and own.n_act == rig.n_act
        # A skill of another robot is built for its own env; the structural check reports the mismatch.
        skills.append(_load_step(step, store, rig if fits else own, spec))
        built_for.append(rig.env_id if fits else own.env_id)
    return CheckContext(chain, options, rig, tuple(skills), tuple(envs), start, store, built_for=tuple(built_for))
