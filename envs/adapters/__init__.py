"""Adapters for gymnasium's own MuJoCo envs: rigs and named state."""
