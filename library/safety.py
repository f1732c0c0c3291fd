"""The cautions printed wherever a result could reach a real machine.

``CAUTION`` goes with every export, retrain, train, check and run (text and
JSON ``caution`` field); ``caution_for`` adds the note for legged robots;
``CAUTION_FOOTER`` is the one line on every PNG kinetome writes. Standard
library only.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "CAUTION",
    "LEGGED_NOTE",
    "CAUTION_FOOTER",
    "LIMITS_NOTE",
    "PROOF_SCOPE",
    "HANDOVER_NOTE",
    "caution_for",
    "is_legged",
]

CAUTION = (
    "Caution: kinetome's results, from simulation and from the solver alike, are statements about a "
    "model, not about a machine; they do not make a controller safe for hardware. Before any use on a "
    "real machine, follow a documented risk assessment and the current editions of the machine-safety "
    "standards that apply (e.g. ISO 12100, ISO 10218-1/-2, ISO/TS 15066, ISO 13849-1, IEC 62061), "
    "local codes and licensed practice."
)

LEGGED_NOTE = "For a legged robot, the standards for that type of machine apply as well."

CAUTION_FOOTER = "Simulation and solver results about a model: not evidence that a controller is safe on hardware."

LIMITS_NOTE = (
    "Declared limits are declarations: kinetome does not enforce them, and they are not a safety function; "
    "'not exceeded' only says what these simulated episodes showed."
)

PROOF_SCOPE = "a proof about the model under the listed premises, not about the machine"

HANDOVER_NOTE = (
    "A person taking a part from a machine, or working next to a moving one, calls for a "
    "collaborative-operation risk assessment and a safety-rated monitored standstill, not a predicate "
    "in a skill file."
)


def is_legged(rig: Any) -> bool:
    """Whether a rig (or its metadata mapping) is a legged robot."""
    metadata = rig if isinstance(rig, dict) else getattr(rig, "metadata", {}) or {}
    return bool(metadata.get("legged", False))


def caution_for(rig: Any = None) -> str:
    """``CAUTION``, plus ``LEGGED_NOTE`` when the result concerns a legged robot."""
    return f"{CAUTION} {LEGGED_NOTE}" if rig is not None and is_legged(rig) else CAUTION
