"""Adapters for gymnasium's own MuJoCo envs: rigs and named state."""

from .gym_mujoco import GYM_ENV_IDS, layout_of, layout_table, named_state_of

__all__ = ["GYM_ENV_IDS", "layout_of", "layout_table", "named_state_of"]
