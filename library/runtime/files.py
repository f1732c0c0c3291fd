"""File roles of a stored skill version (standard library only: `show` imports this)."""

__all__ = ["SPEC_FILE", "PARAMS_FILE"]

SPEC_FILE = "spec.json"
PARAMS_FILE = "params.safetensors"
