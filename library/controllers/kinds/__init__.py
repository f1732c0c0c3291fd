"""Torch-free declarations of the built-in controller kinds (settings, parameters, inputs)."""
