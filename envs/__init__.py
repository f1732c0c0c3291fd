"""kinetome.envs: MuJoCo robots with named state, task variants and initial-states distributions.

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

# Own robots, task variants, initial-states distributions, rendering; importing
# gym_registration registers kinetome/BenchArm-v0, TestWalker-v0, TestWalkerStand-v0.
from . import gym_registration  # noqa: E402
from .variants import (  # noqa: E402
    NOMINAL,
    TaskVariant,
    VariantTargets,
    apply_variant,
    load_variant,
    resolve_variant,
    variant_digest,
    variant_field,
)
from .starts import StartDistribution, load_start, forward_named_state, rig_named_state  # noqa: E402
from .render import filmstrip_png, render_frames  # noqa: E402
from .bench_arm import build_bench_arm  # noqa: E402
from .test_walker import build_test_walker, build_test_walker_stand  # noqa: E402

__all__ += [
    "NOMINAL",
    "TaskVariant",
    "VariantTargets",
    "apply_variant",
    "load_variant",
    "resolve_variant",
    "variant_digest",
    "variant_field",
    "StartDistribution",
    "load_start",
    "forward_named_state",
    "rig_named_state",
    "filmstrip_png",
    "render_frames",
    "build_bench_arm",
    "build_test_walker",
    "build_test_walker_stand",
]
