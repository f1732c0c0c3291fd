"""Running mean/variance (parallel Welford update) for observations and returns.

The merge of two summaries (count, mean, M2) follows Chan, Golub & LeVeque
(1979); one batch at a time it reduces to Welford's update. Stored as
safetensors (float64 arrays), never pickle.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["RunningMoments", "ObservationNormaliser", "ReturnNormaliser", "save_normalisers", "load_normalisers"]


class RunningMoments:
    """Count, mean and sum of squared deviations of a stream of vectors of one shape."""

    def __init__(self, shape: tuple[int, ...] = ()):
        self.shape = tuple(shape)
        self.count = 0.0
        self.mean = np.zeros(self.shape)
        self.m2 = np.zeros(self.shape)

    @property
    def var(self) -> np.ndarray:
        """Population variance (zero before two samples)."""
        return self.m2 / self.count if self.count > 0 else np.zeros(self.shape)

    def update(self, batch: np.ndarray) -> None:
        """Fold in a batch (B, *shape)."""
        batch = np.asarray(batch, dtype=np.float64).reshape((-1, *self.shape))
        n = batch.shape[0]
        if n == 0:
            return
        b_mean = batch.mean(axis=0)
        b_m2 = ((batch - b_mean) ** 2).sum(axis=0)
        total = self.count + n
        delta = b_mean - self.mean
        self.mean = self.mean + delta * (n / total)
        self.m2 = self.m2 + b_m2 + delta**2 * (self.count * n / total)
        self.count = total

    def tensors(self, prefix: str) -> dict[str, np.ndarray]:
        return {
            f"{prefix}.count": np.array([self.count]),
            f"{prefix}.mean": np.array(self.mean, dtype=np.float64).reshape(self.shape or (1,)),
            f"{prefix}.m2": np.array(self.m2, dtype=np.float64).reshape(self.shape or (1,)),
        }

    def load(self, tensors: dict[str, np.ndarray], prefix: str) -> None:
        try:
            mean = tensors[f"{prefix}.mean"].reshape(self.shape)
            m2 = tensors[f"{prefix}.m2"].reshape(self.shape)
            count = float(tensors[f"{prefix}.count"][0])
        except KeyError as exc:
            raise ValueError(f"normaliser tensors lack {exc.args[0]!r}; the file is not a normaliser of this kind") from None
        except ValueError:
            raise ValueError(
                f"normaliser {prefix!r} must have shape {self.shape}, got {tensors[f'{prefix}.mean'].shape}"
            ) from None
        self.count, self.mean, self.m2 = count, mean.copy(), m2.copy()


class ObservationNormaliser:
    """(x - mean) / sqrt(var + eps), clipped to +-clip; statistics update only when asked."""

    def __init__(self, size: int, *, clip: float = 10.0, eps: float = 1e-8):
        self.moments = RunningMoments((size,))
        self.clip = float(clip)
        self.eps = float(eps)

    @property
    def size(self) -> int:
        return self.moments.shape[0]

    def update(self, obs: np.ndarray) -> None:
        self.moments.update(obs)

    def __call__(self, obs: np.ndarray) -> np.ndarray:
        z = (np.asarray(obs, dtype=np.float64) - self.moments.mean) / np.sqrt(self.moments.var + self.eps)
        return np.clip(z, -self.clip, self.clip)

    def tensors(self, prefix: str = "obs") -> dict[str, np.ndarray]:
        out = self.moments.tensors(prefix)
        out[f"{prefix}.settings"] = np.array([self.clip, self.eps])
        return out

    def load(self, tensors: dict[str, np.ndarray], prefix: str = "obs") -> None:
        self.moments.load(tensors, prefix)
        if f"{prefix}.settings" in tensors:
            self.clip, self.eps = (float(v) for v in tensors[f"{prefix}.settings"])


class ReturnNormaliser:
    """Scales rewards by the running std of the discounted return of each env.

    Each env keeps G <- gamma (1 - done) G + r; rewards are divided by
    sqrt(var(G) + eps) (common practice for the clipped objective, where
    advantages then live on a scale near one).
    """

    def __init__(self, parallel_envs: int, *, gamma: float, eps: float = 1e-8):
        self.moments = RunningMoments(())
        self.gamma = float(gamma)
        self.eps = float(eps)
        self.running = np.zeros(parallel_envs)

    @property
    def scale(self) -> float:
        """The factor rewards are multiplied by."""
        return float(1.0 / np.sqrt(self.moments.var + self.eps)) if self.moments.count > 1 else 1.0

    def update(self, rewards: np.ndarray, dones: np.ndarray) -> None:
        """Fold one step's rewards (N,) in; ``dones`` (N,) restart the running return after it."""
        self.running = self.running * self.gamma + np.asarray(rewards, dtype=np.float64)
        self.moments.update(self.running)
        self.running = np.where(np.asarray(dones, dtype=bool), 0.0, self.running)

    def __call__(self, rewards: np.ndarray) -> np.ndarray:
        return np.asarray(rewards, dtype=np.float64) * self.scale

    def tensors(self, prefix: str = "ret") -> dict[str, np.ndarray]:
        out = self.moments.tensors(prefix)
        out[f"{prefix}.running"] = self.running.copy()
        out[f"{prefix}.settings"] = np.array([self.gamma, self.eps])
        return out

    def load(self, tensors: dict[str, np.ndarray], prefix: str = "ret") -> None:
        self.moments.load(tensors, prefix)
        running = tensors.get(f"{prefix}.running")
        if running is not None and running.shape == self.running.shape:
            self.running = running.copy()
        if f"{prefix}.settings" in tensors:
            self.gamma, self.eps = (float(v) for v in tensors[f"{prefix}.settings"])


def save_normalisers(path: str | Path, obs: ObservationNormaliser, ret: ReturnNormaliser | None = None) -> bytes:
    """Write the normalisers as one safetensors file (atomically); return its bytes."""
    from safetensors.numpy import save

    tensors = obs.tensors("obs")
    if ret is not None:
        tensors.update(ret.tensors("ret"))
    data = save(tensors)
    if path is not None:
        from .atomic import write_atomic

        write_atomic(Path(path), data)
    return data


def load_normalisers(
    source: str | Path | bytes, obs: ObservationNormaliser, ret: ReturnNormaliser | None = None
) -> None:
    """Restore normalisers written by :func:`save_normalisers` (path or bytes)."""
    from safetensors.numpy import load

    data = source if isinstance(source, bytes) else Path(source).read_bytes()
    tensors = load(data)
    obs.load(tensors, "obs")
    if ret is not None and "ret.mean" in tensors:
        ret.load(tensors, "ret")
