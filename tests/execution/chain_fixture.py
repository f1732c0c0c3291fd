"""A real simulation job for the execution tests: two bench-arm skills with exploration and sensor noise."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from kinetome.envs import make_rig
from kinetome.library.execution.chain_blocks import chain_job
from kinetome.library.runtime.disturbances import Disturbances
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.runtime.starts import sample_starts
from kinetome.library.spec_load import load_spec

SKILLS = Path(__file__).resolve().parents[2] / "configs" / "skills"
ARM = "kinetome/BenchArm-v0"
SEED = 5


def arm_chain() -> tuple[object, list]:
    rig = make_rig(ARM)
    return rig, [skill_from_spec(load_spec(SKILLS / f"{name}.yaml"), rig=rig) for name in ("arm-lift", "arm-reach-tray")]


def arm_job(rig, skills) -> dict:
    return chain_job(skills, rig, seed=SEED, explore=True, disturbances=Disturbances(sensor_noise=0.01))


def arm_starts(rig, episodes: int) -> tuple[np.ndarray, np.ndarray]:
    return sample_starts(rig, None, episodes, seed=SEED)


def assert_same_rollout(a, b) -> None:
    """Every recorded array equal bit for bit."""
    np.testing.assert_array_equal(a.episode_ids, b.episode_ids)
    for sa, sb in zip(a.segments, b.segments, strict=True):
        for field in ("reason", "steps", "reward", "discounted_return", "discount", "first_command", "last_command"):
            np.testing.assert_array_equal(getattr(sa, field), getattr(sb, field), err_msg=field)
        for part in ("start_state", "end_state", "peaks"):
            da, db = getattr(sa, part), getattr(sb, part)
            assert sorted(da) == sorted(db)
            for name in da:
                np.testing.assert_array_equal(da[name], db[name], err_msg=f"{part}.{name}")
