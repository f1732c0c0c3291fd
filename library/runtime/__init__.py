"""Skill runtime: execute skills and chains as options on batched simulations."""
