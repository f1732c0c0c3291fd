"""Learned initiation regions: where a skill really succeeds, proposed as a ``starts_when``.

``propose`` (pure numpy) turns labelled start states into a proposal with exact intervals;
``sampling`` runs a skill from wide initial states to label them; ``learn`` ties both to the
store (``api.learn_initiation``, ``kinetome learn-initiation``).
"""

from .propose import Proposal, Splits, make_splits, propose, rate

__all__ = ["Proposal", "Splits", "make_splits", "propose", "rate"]
