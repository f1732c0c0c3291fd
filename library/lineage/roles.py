"""File roles a retrained version holds besides ``spec.json`` and ``params.safetensors``."""

from __future__ import annotations

__all__ = ["RECORD_FILE", "EVALUATION_FILE", "VARIANT_FILE", "INITIAL_STATES_FILE"]

RECORD_FILE = "record.json"  # how it was made: method, parent, variant, initial states, config, seed, code, software
EVALUATION_FILE = "evaluation.json"  # training-time metrics and the promotion test on fresh episodes
VARIANT_FILE = "variant.yaml"  # the task variant file, byte for byte
INITIAL_STATES_FILE = "initial_states.yaml"  # the initial-states file, byte for byte (absent: the robot's default)
