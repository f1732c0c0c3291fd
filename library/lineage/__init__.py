"""Lineage a team can trust: what a retrain records, the promotion rule, reproducing a retrain,
and the light summaries ``show``/``lineage`` print.

Light on import (standard library only); the parts that run simulations or training
load their libraries when called.
"""

from kinetome.library.lineage.roles import EVALUATION_FILE, INITIAL_STATES_FILE, RECORD_FILE, VARIANT_FILE

__all__ = [
    "RECORD_FILE",
    "EVALUATION_FILE",
    "VARIANT_FILE",
    "INITIAL_STATES_FILE",
    "retrain_version",
    "reproduce_retrain",
]

_LAZY = {"retrain_version": "retraining", "reproduce_retrain": "retraining"}


def __getattr__(name: str):
    if name in _LAZY:
        from importlib import import_module

        return getattr(import_module(f"kinetome.library.lineage.{_LAZY[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
