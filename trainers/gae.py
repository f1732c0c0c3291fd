"""Generalised advantage estimation over time-major rollouts (pure numpy)."""

from __future__ import annotations

import numpy as np

__all__ = ["gae"]


def gae(
    rewards: np.ndarray,
    values: np.ndarray,
    dones: np.ndarray,
    last_values: np.ndarray,
    *,
    gamma: float,
    lambda_: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Advantages and lambda-returns, both (T, N), from a time-major rollout.

    ``rewards``, ``values`` and ``dones`` are (T, N): ``values[t]`` estimates
    the state before step t, ``dones[t]`` says step t ended the episode (no
    bootstrap through it). ``last_values`` (N,) estimates the state after the
    final step. Truncated episodes are bootstrapped by the caller, who adds
    ``gamma * V(final state)`` to the reward of the truncating step and marks
    it done. delta_t = r_t + gamma (1 - d_t) V_{t+1} - V_t and
    A_t = delta_t + gamma lambda (1 - d_t) A_{t+1} (Schulman et al. 2016).
    """
    rewards = np.asarray(rewards, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)
    dones = np.asarray(dones, dtype=bool)
    last_values = np.asarray(last_values, dtype=np.float64)
    if rewards.ndim != 2:
        raise ValueError(f"rewards must be (T, N), got shape {rewards.shape}")
    for name, arr in (("values", values), ("dones", dones)):
        if arr.shape != rewards.shape:
            raise ValueError(f"{name} must have the shape of rewards {rewards.shape}, got {arr.shape}")
    if last_values.shape != rewards.shape[1:]:
        raise ValueError(f"last_values must be (N,) = {rewards.shape[1:]}, got {last_values.shape}")
    if not 0.0 <= gamma <= 1.0 or not 0.0 <= lambda_ <= 1.0:
        raise ValueError(f"gamma and lambda must lie in [0, 1], got gamma={gamma}, lambda={lambda_}")
    steps = rewards.shape[0]
    carry = 1.0 - dones.astype(np.float64)
    advantages = np.zeros_like(rewards)
    next_values = last_values
    running = np.zeros_like(last_values)
    for t in range(steps - 1, -1, -1):
        delta = rewards[t] + gamma * carry[t] * next_values - values[t]
        running = delta + gamma * lambda_ * carry[t] * running
        advantages[t] = running
        next_values = values[t]
    return advantages, advantages + values
