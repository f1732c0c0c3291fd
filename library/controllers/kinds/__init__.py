"""Torch-free declarations of the built-in controller kinds (options, parameters, inputs)."""
