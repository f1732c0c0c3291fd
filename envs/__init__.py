"""kinetome.envs: MuJoCo robots with named state, task variants and start distributions.

Imports nothing else of kinetome. ``make_rig(env_id, variant=...)`` gives the
batched-simulation description; ``gymnasium.make("kinetome/<Name>-v0")`` gives
the gymnasium env (registered on import of this package).
"""

from .named_state import Quantity, StateLayout, StateValues
from .rig import Rig, Source, make_rig, read_state, register_rig, rig_ids
from .errors import EnvConfigError

__all__ = [
    "Quantity",
    "StateLayout",
    "StateValues",
    "Rig",
    "Source",
    "make_rig",
    "read_state",
    "register_rig",
    "rig_ids",
    "EnvConfigError",
]
