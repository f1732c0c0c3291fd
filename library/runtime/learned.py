"""Learned parts of an options-mode training, run as trained: a skill's stop head and the chooser over skills.

Both read the trainer's features: ``rig.observe(state)`` standardised by the
observation statistics stored with the version (``normaliser.safetensors``,
keys ``obs.count``/``obs.mean``/``obs.m2``/``obs.settings``), then a tanh MLP
stored as safetensors (``<prefix>.net.<i>.weight``/``bias``), evaluated here
in float64 numpy so running a version needs no trainer.

A learned stop makes a skill's end stochastic: at each step the head gives a
stop probability beta(s), one uniform draw per episode decides, and the
version's stop mode says how that combines with ``stops_when``
(``stop_rule``). Static proofs about ``stops_when`` then cover only the turns
that ended inside ``stops_when``; ``LearnedStop.within_stops_when`` says
whether every stop does.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from .files import CHOOSER_FILE, CHOOSER_NET_FILE, LEARNED_STOP_FILE, NORMALISER_FILE

__all__ = [
    "STOP_MODES",
    "CLOCK_INPUTS",
    "clock_features",
    "phase_angles",
    "stop_rule",
    "FeatureScaler",
    "TanhNet",
    "TrainedFeatures",
    "LearnedStop",
    "Chooser",
    "learned_stop_json",
    "chooser_json",
    "StopDraws",
]

# How a skill's stop relates to its stops_when predicate (beta: the learned stop probability):
#   registered: stop where stops_when holds (nothing learned)
#   hard:       stop where stops_when holds; elsewhere with probability beta
#   confined:   where stops_when holds, stop with probability beta; never elsewhere
#   learned:    stop with probability beta everywhere (stops_when is ignored)
# Every mode also ends a turn after max_steps (a timeout, never a learned decision).
STOP_MODES = ("registered", "hard", "confined", "learned")



# Optional inputs next to the observation (``critic_inputs`` in training settings):
#   time_remaining: the fraction of the episode's step limit still left, in [0, 1];
#   phase:          sin and cos of the running skill's oscillator phase (0 for kinds without one).
CLOCK_INPUTS = ("time_remaining", "phase")


def phase_angles(controllers: Any, skill: np.ndarray, skill_time: np.ndarray) -> np.ndarray:
    """(B,) phase of each row's running skill at its skill time; 0 where the kind has no oscillator."""
    out = np.zeros(len(skill))
    for k, controller in enumerate(controllers):
        rows = np.flatnonzero(np.asarray(skill) == k)
        if rows.size and hasattr(controller, "phase_angle"):
            out[rows] = controller.phase_angle(np.asarray(skill_time)[rows])
    return out


def clock_features(inputs: tuple[str, ...], *, episode_step: np.ndarray, limit: np.ndarray | int, phase: np.ndarray) -> np.ndarray:
    """(B, n) the ``CLOCK_INPUTS`` named in ``inputs``, in that order: time remaining, then sin and cos of the phase."""
    unknown = [name for name in inputs if name not in CLOCK_INPUTS]
    if unknown:
        raise ValueError(f"critic inputs must be among {', '.join(CLOCK_INPUTS)}, got {unknown}")
    columns: list[np.ndarray] = []
    if "time_remaining" in inputs:
        limit = np.asarray(limit, dtype=np.float64)
        columns.append(np.clip((limit - np.asarray(episode_step, dtype=np.float64)) / limit, 0.0, 1.0))
    if "phase" in inputs:
        columns += [np.sin(phase), np.cos(phase)]
    n = len(np.asarray(phase))
    return np.stack(columns, axis=1) if columns else np.zeros((n, 0))


def stop_rule(mode: str, stops: np.ndarray, timeout: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(forced, learnable), (B,) bool each: turns that end whatever beta says, and where beta decides."""
    if mode not in STOP_MODES:
        raise ValueError(f"stop mode must be one of {', '.join(STOP_MODES)}, got {mode!r}")
    stops = np.asarray(stops, dtype=bool)
    forced = np.asarray(timeout, dtype=bool).copy()
    if mode in ("registered", "hard"):
        forced |= stops
    if mode == "learned":
        learnable = np.ones(len(stops), dtype=bool)
    elif mode == "hard":
        learnable = ~stops
    elif mode == "confined":
        learnable = stops
    else:
        learnable = np.zeros(len(stops), dtype=bool)
    return forced, learnable & ~forced


@dataclass(frozen=True, eq=False)
class FeatureScaler:
    """(x - mean) / sqrt(var + eps), clipped to +-clip: the trainer's observation normaliser, frozen."""

    mean: np.ndarray
    var: np.ndarray
    clip: float = 10.0
    eps: float = 1e-8

    @classmethod
    def from_tensors(cls, tensors: Mapping[str, np.ndarray], prefix: str = "obs") -> "FeatureScaler":
        try:
            count = float(tensors[f"{prefix}.count"][0])
            mean = np.asarray(tensors[f"{prefix}.mean"], dtype=np.float64)
            m2 = np.asarray(tensors[f"{prefix}.m2"], dtype=np.float64)
        except KeyError as exc:
            raise ValueError(f"normaliser must hold {exc.args[0]!r}; the file is not an observation normaliser") from None
        settings = tensors.get(f"{prefix}.settings")
        clip, eps = (10.0, 1e-8) if settings is None else (float(settings[0]), float(settings[1]))
        var = m2 / count if count > 0 else np.zeros_like(mean)
        return cls(mean, var, clip, eps)

    def __call__(self, obs: np.ndarray) -> np.ndarray:
        z = (np.asarray(obs, dtype=np.float64) - self.mean) / np.sqrt(self.var + self.eps)
        return np.clip(z, -self.clip, self.clip)


@dataclass(frozen=True, eq=False)
class TanhNet:
    """Linear layers with tanh between them (none after the last): (B, n_in) -> (B, n_out)."""

    weights: tuple[np.ndarray, ...]
    biases: tuple[np.ndarray, ...]

    @classmethod
    def from_tensors(cls, tensors: Mapping[str, np.ndarray], prefix: str) -> "TanhNet":
        head = f"{prefix}.net."
        indices = sorted({int(k[len(head):].split(".")[0]) for k in tensors if k.startswith(head)})
        if not indices:
            raise ValueError(f"network tensors must have keys {head}<i>.weight, got {sorted(tensors)[:4]}")
        weights = tuple(np.asarray(tensors[f"{head}{i}.weight"], dtype=np.float64) for i in indices)
        biases = tuple(np.asarray(tensors[f"{head}{i}.bias"], dtype=np.float64) for i in indices)
        return cls(weights, biases)

    @property
    def n_in(self) -> int:
        return int(self.weights[0].shape[1])

    @property
    def n_out(self) -> int:
        return int(self.weights[-1].shape[0])

    def __call__(self, x: np.ndarray) -> np.ndarray:
        h = np.asarray(x, dtype=np.float64)
        for i, (w, b) in enumerate(zip(self.weights, self.biases)):
            h = h @ w.T + b
            if i < len(self.weights) - 1:
                h = np.tanh(h)
        return h


class StopDraws:
    """Uniform draws for learned stops, one independent stream per episode (batch-size independent)."""

    _STREAM = 11  # distinct from start sampling (0) and exploration noise (7)

    def __init__(self, seed: int, n_episodes: int, *, episode_ids: np.ndarray | None = None):
        from .streams import EpisodeStreams

        ids = range(n_episodes) if episode_ids is None else [int(i) for i in episode_ids]
        self._streams = EpisodeStreams(seed, ids, self._STREAM, kind="uniform")

    def draw(self, episodes: np.ndarray) -> np.ndarray:
        """(len(episodes),) uniforms in [0, 1); each advances only its own episode's stream (read batch-wide)."""
        return self._streams.take(episodes, 1)[:, 0]


@dataclass(frozen=True, eq=False)
class TrainedFeatures:
    """The trainer's network inputs: standardised ``rig.observe(state)``, then the clock inputs it used."""

    scaler: FeatureScaler
    inputs: tuple[str, ...] = ()  # CLOCK_INPUTS used in training
    limit: int = 0  # the training's episode step limit (time_remaining counts against it); 0: not recorded

    def __call__(self, rig: Any, state: Mapping[str, np.ndarray], width: int, *, episode_step: np.ndarray | None = None,
                 phase: np.ndarray | None = None) -> np.ndarray:
        obs = np.asarray(rig.observe(state), dtype=np.float64)
        n_clock = clock_features(self.inputs, episode_step=np.zeros(1), limit=1, phase=np.zeros(1)).shape[1]
        if obs.shape[1] + n_clock != width:
            raise ValueError(
                f"features must have {width - n_clock} observation entries (the training env's), got {obs.shape[1]} "
                f"from {rig.env_id}; run the version on the env it was trained on"
            )
        x = self.scaler(obs)
        if not self.inputs:
            return x
        n = obs.shape[0]
        step = np.zeros(n) if episode_step is None else np.asarray(episode_step, dtype=np.float64)
        angle = np.zeros(n) if phase is None else np.asarray(phase, dtype=np.float64)
        return np.concatenate([x, clock_features(self.inputs, episode_step=step, limit=self.limit, phase=angle)], axis=1)

    @classmethod
    def from_files(cls, doc: Mapping[str, Any], normaliser: bytes) -> "TrainedFeatures":
        inputs = tuple(str(x) for x in doc.get("critic_inputs", ()))
        return cls(FeatureScaler.from_tensors(_load_tensors(normaliser)), inputs, int(doc.get("episode_limit", 0)))


def _load_tensors(data: bytes) -> dict[str, np.ndarray]:
    from safetensors.numpy import load

    return load(data)


@dataclass(frozen=True, eq=False)
class LearnedStop:
    """A skill's learned stop: head ``index`` of the stop heads, combined with stops_when by ``mode``."""

    mode: str
    index: int
    net: TanhNet
    features: TrainedFeatures

    def __post_init__(self) -> None:
        if self.mode not in STOP_MODES or self.mode == "registered":
            raise ValueError(f"learned stop mode must be hard, confined or learned, got {self.mode!r}")
        if not 0 <= self.index < self.net.n_out:
            raise ValueError(f"stop head index must be in [0, {self.net.n_out - 1}], got {self.index}")

    @property
    def within_stops_when(self) -> bool:
        """True when every stop lies inside stops_when (confined): static proofs then cover all stopped turns."""
        return self.mode == "confined"

    def probability(self, rig: Any, state: Mapping[str, np.ndarray], *, episode_step: np.ndarray | None = None,
                    phase: np.ndarray | None = None) -> np.ndarray:
        """beta(s), (B,): the probability that the skill stops in each state (clock inputs as trained)."""
        x = self.features(rig, state, self.net.n_in, episode_step=episode_step, phase=phase)
        logits = self.net(x)[:, self.index]
        return 1.0 / (1.0 + np.exp(-logits))

    def decide(self, stops: np.ndarray, timeout: np.ndarray, beta: np.ndarray, u: np.ndarray) -> np.ndarray:
        """(B,) bool: the turn stops (not counting timeouts) given stops_when, beta and uniform draws ``u``."""
        by_rule, learnable = stop_rule(self.mode, stops, np.zeros(len(stops), dtype=bool))
        learnable &= ~np.asarray(timeout, dtype=bool)  # a timeout step is never a learned decision
        return by_rule | (learnable & (np.asarray(u) < beta))

    def describe(self) -> str:
        text = {
            "hard": "stops where stops_when holds, and elsewhere with a learned probability",
            "confined": "stops only where stops_when holds, with a learned probability",
            "learned": "stops with a learned probability; stops_when is not used",
        }[self.mode]
        return f"learned stop ({self.mode}): {text}"

    def to_json(self) -> bytes:
        return learned_stop_json(self.mode, self.index, self.features.inputs, self.features.limit)

    @classmethod
    def from_files(cls, stop_json: bytes, heads: bytes, normaliser: bytes) -> "LearnedStop":
        doc = _document(stop_json, "kinetome.learned-stop/1", LEARNED_STOP_FILE)
        return cls(str(doc["mode"]), int(doc["index"]), TanhNet.from_tensors(_load_tensors(heads), "heads"),
                   TrainedFeatures.from_files(doc, normaliser))


@dataclass(frozen=True, eq=False)
class Chooser:
    """The policy over skills trained with them: greedy on the critic's Q among skills whose starts_when holds."""

    skill_refs: tuple[str, ...]
    net: TanhNet
    features: TrainedFeatures

    def __post_init__(self) -> None:
        if len(self.skill_refs) != self.net.n_out:
            raise ValueError(f"chooser must name {self.net.n_out} skills (one per critic output), got {len(self.skill_refs)}")

    def values(self, rig: Any, state: Mapping[str, np.ndarray], *, episode_step: np.ndarray | None = None,
               phase: np.ndarray | None = None) -> np.ndarray:
        """Q(s, w) for every skill, (B, n_skills)."""
        return self.net(self.features(rig, state, self.net.n_in, episode_step=episode_step, phase=phase))

    def choose(self, rig: Any, state: Mapping[str, np.ndarray], available: np.ndarray, **clock: Any) -> np.ndarray:
        """(B,) int64: the available skill with the highest Q (first on ties), -1 where none is available."""
        available = np.asarray(available, dtype=bool)
        q = np.where(available, self.values(rig, state, **clock), -np.inf)
        return np.where(available.any(axis=1), np.argmax(q, axis=1), -1).astype(np.int64)

    def to_json(self) -> bytes:
        return chooser_json(self.skill_refs, self.features.inputs, self.features.limit)

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "Chooser":
        """From the files of a ``CHOOSER_KIND`` model: ``chooser.json``, the critic and the normaliser."""
        doc = _document(files[CHOOSER_FILE], "kinetome.chooser/1", CHOOSER_FILE)
        return cls(tuple(str(s) for s in doc["skills"]), TanhNet.from_tensors(_load_tensors(files[CHOOSER_NET_FILE]), "critic"),
                   TrainedFeatures.from_files(doc, files[NORMALISER_FILE]))


def learned_stop_json(mode: str, index: int, inputs: tuple[str, ...], limit: int) -> bytes:
    """``learned_stop.json``: the stop mode, which head is this skill's, and the clock inputs it was trained with."""
    doc = {"schema": "kinetome.learned-stop/1", "mode": mode, "index": int(index), "critic_inputs": list(inputs), "episode_limit": int(limit)}
    return json.dumps(doc, sort_keys=True).encode()


def chooser_json(refs: Any, inputs: tuple[str, ...], limit: int) -> bytes:
    """``chooser.json``: the stored skills in critic order and the clock inputs the critic was trained with."""
    doc = {"schema": "kinetome.chooser/1", "skills": list(refs), "critic_inputs": list(inputs), "episode_limit": int(limit)}
    return json.dumps(doc, sort_keys=True).encode()


def _document(data: bytes, schema: str, role: str) -> dict[str, Any]:
    doc = json.loads(data.decode("utf-8"))
    if not isinstance(doc, dict) or doc.get("schema") != schema:
        raise ValueError(f"{role} must have schema {schema}, got {doc!r:.80}")
    return doc
